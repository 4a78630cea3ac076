"""What the tool refuses: the names it accepts and the upper bounds of every
size a user or a file on disk can choose (declared here once; the README's
section "What the tool refuses" lists them and a test keeps the two in step).

Each bound keeps a run finite in time and memory: a number that sets the
length of a loop, the size of an array or of a file we write is checked
against its bound *before* the loop runs or the array is made, and a value
over it is a :class:`~caseprep.contract.errors.UserError` naming the key.

The values are generous for real vehicle studies on a workstation or a
cluster (common practice, no source): they refuse mistakes (a unit slip, an
extra zero, a hostile file), not large honest studies. A study that truly
needs more is split into several sweep folders.
"""
from __future__ import annotations

import re
from dataclasses import dataclass

#: Names the user chooses (study, variants, wheels) and case ids: they become
#: folder names, patch names and shell words, so only these characters.
NAME_RE = re.compile(r"[A-Za-z][A-Za-z0-9_-]*")
NAME_RULE = "a name made of letters, digits, '_' and '-', starting with a letter"


@dataclass(frozen=True)
class Limit:
    """One bound: ``what`` it bounds (config key or file item), the largest
    accepted ``value`` in ``unit``, and ``why`` (what goes wrong beyond it)."""

    what: str
    value: float
    unit: str
    why: str

    def __int__(self) -> int:
        return int(self.value)

    def __float__(self) -> float:
        return float(self.value)


# ------------------------------------------------------------ config and sweep
MAX_NAME_LENGTH = Limit("study.name, variants.<name>, body.wheels[].name", 64, "characters",
                        "names become folder and patch names; a case id is the variant name + 9 characters")
MAX_TEXT_LENGTH = Limit("any other text value of the config (descriptions, file paths)", 4096, "characters",
                        "descriptions and paths are copied into the manifest and the messages")
MAX_CONFIG_BYTES = Limit("size of the config file", 1_000_000, "bytes", "a sweep config is a few kilobytes")
MAX_AXIS_VALUES = Limit("values in one sweep axis, sweep.points, sweep.variants or body.wheels", 1000, "values",
                        "each value multiplies the number of cases")
MAX_VARIANTS = Limit("[variants] tables", 200, "variants", "each variant is read and measured once")
MAX_CASES = Limit("cases of one sweep (the product of the sweep axes, or points × variants)", 10_000, "cases",
                  "every case is planned in memory and written as a folder of ~20 files")
MAX_CELLS = Limit("estimated cells of one case", 500_000_000, "cells",
                  "about 1 GB of memory per million cells: beyond this no single machine meshes it")
MAX_RANKS = Limit("solver.ranks", 4096, "ranks", "the domain is split into this many pieces")
MAX_ITERATIONS = Limit("solver.iterations and solver.write_interval", 1_000_000, "iterations",
                       "a steady solve converges in thousands of iterations")
MAX_DOMAIN_LENGTHS = Limit("domain.upstream and domain.downstream", 100, "body lengths",
                           "the background mesh grows with the domain")
MAX_RIDE_HEIGHT_LENGTHS = Limit("front or rear ride height of one case", 5, "body lengths",
                                "beyond a few body lengths no ground effect is left to study (a sphere's wall "
                                "effect on drag is about 1 % at 4 diameters); larger usually means mm read as m")
MAX_LENGTH = Limit("any length or coordinate of the config and the geometry (domain sizes, points, ride heights)",
                   10_000, "m", "a vehicle study fits in a 10 km box; larger means a unit slip (mm read as m)")
MAX_STL_TRIANGLES = Limit("triangles of one geometry file", 50_000_000, "triangles",
                          "2.5 GB as binary STL; the hull and checks hold all of it in memory")

# ------------------------------------------------------------ files read back
MAX_JSON_BYTES = Limit("size of manifest.json, underfloor-run.json and the export's series file", 512_000_000, "bytes",
                       "a manifest of MAX_CASES cases is a few tens of megabytes")
MAX_JSON_DEPTH = Limit("nesting of manifest.json and underfloor-run.json", 32, "levels",
                       "our files nest 4 levels; deep nesting exhausts the parser's stack")
MAX_VTK_MEMORY = Limit("memory of the process that reads one case's VTK export", 8_000_000_000, "bytes",
                       "a file that declares more than it holds must fail alone, not take the machine")
MAX_VTM_BLOCKS = Limit("blocks of one .vtm multiblock file", 100_000, "blocks", "one block per patch")
MAX_VTK_SECONDS = Limit("time to read one case's VTK surfaces", 600, "s",
                        "a hung reader must not hang the whole sweep")
MAX_ANALYSIS_SECONDS = Limit("time to read and analyse one case's volume (flow columns, flow commands)", 3600, "s",
                             "a hung reader must not hang the sweep; a large mesh's vortex analysis takes minutes")

# ------------------------------------------------------------ results tables (postproc analyse)
MAX_TABLE_BYTES = Limit("size of a results CSV, or of a sweep's results.json, read by postproc analyse", 50_000_000,
                        "bytes", "the whole table is held in memory as text while it is parsed")
MAX_TABLE_ROWS = Limit("data rows of a results table", MAX_CASES.value, "rows",
                       "as many as a sweep has cases; the maps, peaks and ranking of 10,000 rows take minutes")
MAX_TABLE_COLUMNS = Limit("columns of a results CSV", 200, "columns",
                          "the table has 20 columns (others are ignored); each column is parsed in every row")
MAX_CELL_LENGTH = Limit("characters of one cell of a results CSV", 256, "characters",
                        "names have at most 64 characters, flags a few words, numbers about 20 characters")
MAX_TABLE_VARIANTS = Limit("variants of a results table", MAX_VARIANTS.value, "variants",
                           "each variant gets its maps, peaks and platform; as many as a sweep may have")
MAX_TABLE_PAIRS = Limit("variants × distinct operating points of a results table", 200_000, "pairs",
                        "the ranking lists, for every variant, each point of the envelope it misses or has flagged")

LIMITS: tuple[Limit, ...] = (
    MAX_NAME_LENGTH, MAX_TEXT_LENGTH, MAX_CONFIG_BYTES, MAX_AXIS_VALUES, MAX_VARIANTS, MAX_CASES, MAX_CELLS,
    MAX_RANKS, MAX_ITERATIONS, MAX_DOMAIN_LENGTHS, MAX_LENGTH, MAX_STL_TRIANGLES, MAX_JSON_BYTES, MAX_JSON_DEPTH,
    MAX_VTK_MEMORY, MAX_VTM_BLOCKS, MAX_VTK_SECONDS, MAX_ANALYSIS_SECONDS, MAX_TABLE_BYTES, MAX_TABLE_ROWS,
    MAX_TABLE_COLUMNS, MAX_CELL_LENGTH, MAX_TABLE_VARIANTS, MAX_TABLE_PAIRS,
)


def is_name(value: object) -> bool:
    """True for a string following :data:`NAME_RULE` no longer than :data:`MAX_NAME_LENGTH`."""
    return isinstance(value, str) and len(value) <= MAX_NAME_LENGTH.value and NAME_RE.fullmatch(value) is not None


#: Case ids: a variant name and an 8-hex-digit suffix (caseprep.planning.points); any
#: name of the rule above up to the variant length plus the suffix is accepted back.
MAX_CASE_ID_LENGTH = int(MAX_NAME_LENGTH.value) + 9


def is_case_id(value: object) -> bool:
    """True when ``value`` can be a case id (a name, at most
    :data:`MAX_CASE_ID_LENGTH` characters): a single safe path component."""
    return isinstance(value, str) and len(value) <= MAX_CASE_ID_LENGTH and NAME_RE.fullmatch(value) is not None
