"""Run every benchmark script in this folder (``make bench``), one after the other.

Benchmarks are scripts, not tests: each prints its own measurements and the
ratios against its targets. This runner only starts them and reports which
ones failed to run.
"""
from __future__ import annotations

import subprocess
import sys
from pathlib import Path


def main() -> int:
    here = Path(__file__).resolve().parent
    failed = []
    for script in sorted(here.glob("bench_*.py")):
        print(f"=== {script.name}", flush=True)
        rc = subprocess.call([sys.executable, str(script)])
        if rc != 0:
            failed.append(script.name)
    if failed:
        print("benchmarks that failed to run: " + ", ".join(failed))
        return 1
    return 0


if __name__ == "__main__":
    sys.exit(main())
