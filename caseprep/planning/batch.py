"""Batch settings of a sweep: the resources of the cluster jobs that run it
(the solver array, the post-processing array, the merge and report job).

:class:`BatchSettings` is the hand-over from the config (table ``[cluster]``)
to the writer of the job scripts; its defaults are the config keys' declared
defaults (:mod:`caseprep.config.keys`, where each key's format is declared
and documented). Times and memory amounts are text in the batch system's own
format (``HH:MM:SS``, ``D-HH:MM:SS``; ``2G``, ``500M``), validated when the
config is read.
"""
from __future__ import annotations

from dataclasses import dataclass

from caseprep.config.keys import default
from caseprep.config.schema import Config


@dataclass(frozen=True)
class BatchSettings:
    """Resources of the sweep's batch jobs (see the ``cluster.*`` config keys).

    ``cores_per_case``: cores and MPI ranks of a case's job (None: the
    planned ranks of the sweep); ``max_running``: cases at once (0: no limit
    of ours); ``postproc_shards``: post-processing array tasks (fewer when the
    sweep has fewer cases)."""

    partition: str = default("cluster.partition")
    account: str = default("cluster.account")
    cores_per_case: int | None = None
    memory_per_core: str = default("cluster.memory_per_core")
    case_time: str = default("cluster.case_time")
    max_running: int = default("cluster.max_running")
    postproc_shards: int = default("cluster.postproc_shards")
    postproc_cores: int = default("cluster.postproc_cores")
    postproc_memory: str = default("cluster.postproc_memory")
    postproc_time: str = default("cluster.postproc_time")
    report_memory: str = default("cluster.report_memory")
    report_time: str = default("cluster.report_time")

    def shards(self, n_cases: int) -> int:
        """Post-processing array tasks for ``n_cases`` cases: at most one per case."""
        return max(1, min(self.postproc_shards, n_cases))


def batch_settings(cfg: Config) -> BatchSettings:
    """The :class:`BatchSettings` of a validated config."""
    c = cfg.cluster
    return BatchSettings(**{name: getattr(c, name) for name in type(c).model_fields})


__all__ = ["BatchSettings", "batch_settings"]
