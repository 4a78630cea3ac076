"""Does ``caseprep write`` still write the same case folders? Writes every
example config (``example_cases/*/sweep.toml``, at each fidelity preset) once
with the code of a given git revision and once with the working tree, and
compares the two sweep folders file by file, byte by byte (symbolic links by
their target).

The one field that may differ is the manifest's ``created_utc`` (the time of
writing); it is blanked on both sides before the manifests are compared, and
nothing else is.

    python tests/benchmarks/compare_write.py [--ref 6c064c8]

The revision is checked out with ``git worktree add`` into a temporary
folder (removed afterwards); each side runs in its own Python process with
only its own tree on the import path. Exit code 0 when every file is the
same, 1 when any differs (each difference is listed), 2 on a usage error.
"""
from __future__ import annotations

import argparse
import json
import os
import subprocess
import sys
import tempfile
from pathlib import Path

ROOT = Path(__file__).resolve().parents[2]
FIDELITIES = ("smoke", "coarse", "production")

# Run inside the child: put one tree first on the path, check the import came
# from there, then write the sweep with that tree's command line.
_CHILD = """
import sys
tree, config, out, fidelity = sys.argv[1:5]
sys.path.insert(0, tree)
import caseprep
assert caseprep.__file__.startswith(tree), (caseprep.__file__, tree)
from caseprep.cli import main
sys.argv = ["caseprep", "write", config, "-o", out, "--fidelity", fidelity]
main()
"""


def write_with(tree: Path, config: Path, out: Path, fidelity: str) -> None:
    """``caseprep write CONFIG -o OUT --fidelity F`` with the code in ``tree``."""
    env = {k: v for k, v in os.environ.items() if k != "PYTHONPATH"}
    r = subprocess.run([sys.executable, "-c", _CHILD, str(tree), str(config), str(out), fidelity],
                       capture_output=True, text=True, env=env, cwd=tree)
    if r.returncode != 0:
        raise RuntimeError(f"caseprep write failed in {tree} for {config} ({fidelity}):\n{r.stdout}\n{r.stderr}")


def snapshot(folder: Path) -> dict[str, bytes]:
    """Relative path → content (a link: b'-> target'), the manifest's
    ``created_utc`` blanked."""
    out: dict[str, bytes] = {}
    for p in sorted(folder.rglob("*")):
        rel = p.relative_to(folder).as_posix()
        if p.is_symlink():
            out[rel] = b"-> " + os.readlink(p).encode()
        elif p.is_file():
            data = p.read_bytes()
            if p.name == "manifest.json" and p.parent == folder:
                d = json.loads(data)
                d["created_utc"] = ""
                data = json.dumps(d, indent=2).encode()
            out[rel] = data
    return out


def compare(a: dict[str, bytes], b: dict[str, bytes]) -> list[str]:
    """The differences between two snapshots, one line each."""
    diffs = [f"only in the reference: {k}" for k in sorted(set(a) - set(b))]
    diffs += [f"only in the working tree: {k}" for k in sorted(set(b) - set(a))]
    diffs += [f"differs: {k}" for k in sorted(set(a) & set(b)) if a[k] != b[k]]
    return diffs


def main(argv: list[str] | None = None) -> int:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--ref", default="6c064c8", help="git revision to compare against (default: %(default)s)")
    args = ap.parse_args(argv)
    configs = sorted(ROOT.glob("example_cases/*/sweep.toml"))
    with tempfile.TemporaryDirectory(prefix="uf-compare-") as tmp:
        tmp = Path(tmp)
        ref_tree = tmp / "ref"
        r = subprocess.run(["git", "-C", str(ROOT), "worktree", "add", "--detach", str(ref_tree), args.ref],
                           capture_output=True, text=True)
        if r.returncode != 0:
            print(f"error: cannot check out {args.ref}: {r.stderr.strip()}", file=sys.stderr)
            return 2
        try:
            total, bad = 0, []
            for config in configs:
                for fid in FIDELITIES:
                    name = f"{config.parent.name}-{fid}"
                    # both sides read the same config and geometry files: only the code differs
                    write_with(ref_tree, config, tmp / "a" / name, fid)
                    write_with(ROOT, config, tmp / "b" / name, fid)
                    a, b = snapshot(tmp / "a" / name), snapshot(tmp / "b" / name)
                    diffs = compare(a, b)
                    total += len(a)
                    print(f"{name}: {len(a)} files, {'same' if not diffs else f'{len(diffs)} differences'}")
                    bad += [f"{name}: {d}" for d in diffs]
        finally:
            subprocess.run(["git", "-C", str(ROOT), "worktree", "remove", "--force", str(ref_tree)],
                           capture_output=True, text=True)
    for line in bad:
        print(line)
    print(f"{total} files compared against {args.ref}: " + ("all byte-identical" if not bad else f"{len(bad)} differ"))
    return 1 if bad else 0


if __name__ == "__main__":
    sys.exit(main())
