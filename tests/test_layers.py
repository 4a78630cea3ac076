"""The import rules of the layered layout, read from the source with ``ast``
(no module is imported). Layers, bottom up: the shared contract
(caseprep.contract), then caseprep's config/geometry → planning → case files
and run, and postproc's kernels → io → pipelines → report → CLI.

Rules (a forbidden import fails naming the importing module and the
imported one; every import counts, also one inside a function):

1. caseprep never imports postproc.
2. postproc imports from caseprep only the shared contract.
3. The shared contract imports nothing else of the project.
4. Kernels import only numpy/scipy (and the standard library) and, of the
   project, other kernels and the shared errors.
5. Only the CLI modules (``*/cli.py`` and ``caseprep/contract/cli*.py``)
   import click.
6. The report imports no kernel, reader or pipeline: it renders the data it
   is given.
7. Each subpackage imports only the layers listed for it in ``ALLOWED``.
8. No import cycles between modules.

Common practice, no source: a layered architecture whose dependencies point
one way.
"""
from __future__ import annotations

import ast
import functools
import sys
from pathlib import Path

import pytest

ROOT = Path(__file__).resolve().parent.parent
PACKAGES = ("caseprep", "postproc")

#: Project imports each group may make (a group is a subpackage, or a single module).
ALLOWED: dict[str, tuple[str, ...]] = {
    "caseprep": ("caseprep.contract",),  # the package's __init__
    "caseprep.contract": ("caseprep.contract",),
    "caseprep.config": ("caseprep.contract", "caseprep.config"),
    "caseprep.geometry": ("caseprep.contract", "caseprep.geometry"),
    "caseprep.planning": ("caseprep.contract", "caseprep.config", "caseprep.geometry", "caseprep.planning"),
    "caseprep.casefiles": ("caseprep.contract", "caseprep.geometry", "caseprep.planning", "caseprep.casefiles"),
    "caseprep.run": ("caseprep.contract", "caseprep.run"),
    "caseprep.cli": ("caseprep",),
    "postproc": ("caseprep.contract",),  # the package's __init__
    "postproc.kernels": ("caseprep.contract.errors", "postproc.kernels"),
    "postproc.io": ("caseprep.contract", "postproc.kernels", "postproc.io"),
    "postproc.pipelines": ("caseprep.contract", "postproc.kernels", "postproc.io", "postproc.pipelines"),
    "postproc.report": ("caseprep.contract", "postproc.report"),
    "postproc.cli": ("caseprep.contract", "postproc"),
}
#: Third-party packages each group may import (besides the standard library); None: any.
THIRD_PARTY: dict[str, tuple[str, ...] | None] = {
    "caseprep.contract": ("numpy", "jinja2", "pydantic", "click"),
    "postproc.kernels": ("numpy", "scipy"),
}
CLI_MODULES = ("caseprep.cli", "postproc.cli")


def _is_cli(module: str) -> bool:
    return module in CLI_MODULES or module.startswith("caseprep.contract.cli")


def read_tree(root: Path = ROOT) -> dict[str, str]:
    """Module name → source of every module of the two packages (the
    templates link is data, not code)."""
    return dict(_read_tree(root))


@functools.lru_cache(maxsize=None)
def _read_tree(root: Path) -> tuple[tuple[str, str], ...]:
    out = {}
    for pkg in PACKAGES:
        for f in sorted((root / pkg).rglob("*.py")):
            rel = f.relative_to(root)
            if "templates" in rel.parts:
                continue
            parts = list(rel.with_suffix("").parts)
            if parts[-1] == "__init__":
                parts.pop()
            out[".".join(parts)] = f.read_text(encoding="utf-8")
    return tuple(out.items())


def imports_of(module: str, source: str, is_package: bool, known: set[str]) -> set[str]:
    """Every module ``module`` imports (absolute names; ``from p import m``
    counts ``p.m`` when that is a module of the project, else ``p``)."""
    found: set[str] = set()
    base = module.split(".") if is_package else module.split(".")[:-1]
    for node in ast.walk(ast.parse(source, filename=module)):
        if isinstance(node, ast.Import):
            found.update(a.name for a in node.names)
        elif isinstance(node, ast.ImportFrom):
            if node.level:
                anchor = base[: len(base) - (node.level - 1)] if node.level > 1 else base
                target = ".".join(anchor + ([node.module] if node.module else []))
            else:
                target = node.module or ""
            for a in node.names:
                sub = f"{target}.{a.name}"
                found.add(sub if sub in known else target)
    return found


def _group(module: str) -> str:
    best = ""
    for g in ALLOWED:
        if (module == g or module.startswith(g + ".")) and len(g) > len(best):
            best = g
    return best


def _inside(name: str, prefixes) -> bool:
    return any(name == p or name.startswith(p + ".") for p in prefixes)


def violations(tree: dict[str, str]) -> list[str]:
    """The broken rules of ``tree`` (module → source), one message each,
    naming the importing and the imported module."""
    known = set(tree)
    packages = {m for m in tree if any(k.startswith(m + ".") for k in tree)}
    stdlib = set(sys.stdlib_module_names) | {"__future__"}
    graph: dict[str, set[str]] = {}
    out: list[str] = []
    for mod, src in sorted(tree.items()):
        group = _group(mod)
        deps = imports_of(mod, src, mod in packages, known)
        graph[mod] = {d for d in deps if d in known and d != mod}
        for dep in sorted(deps):
            top = dep.split(".")[0]
            if top in PACKAGES:
                if mod.startswith("caseprep") and top == "postproc":
                    out.append(f"{mod} imports {dep}: caseprep never imports postproc")
                elif mod.startswith("postproc") and top == "caseprep" and not _inside(dep, ("caseprep.contract",)):
                    out.append(f"{mod} imports {dep}: postproc imports from caseprep only caseprep.contract")
                elif group == "postproc.report" and _inside(dep, ("postproc.kernels", "postproc.io", "postproc.pipelines")):
                    out.append(f"{mod} imports {dep}: the report renders data and imports no kernel, reader or pipeline")
                elif group and not _inside(dep, ALLOWED[group]):
                    out.append(f"{mod} imports {dep}: {group} may import only {', '.join(ALLOWED[group])}")
            elif top == "click" and not _is_cli(mod):
                out.append(f"{mod} imports {dep}: only the CLI modules import click")
            elif top not in stdlib and THIRD_PARTY.get(group) is not None and top not in THIRD_PARTY[group]:
                out.append(f"{mod} imports {dep}: {group} may import only the standard library and "
                           f"{', '.join(THIRD_PARTY[group])}")
    out += [f"import cycle: {' -> '.join(c)}" for c in cycles(graph)]
    return out


def cycles(graph: dict[str, set[str]]) -> list[list[str]]:
    """One cycle per strongly connected group of modules (Tarjan 1972,
    "Depth-first search and linear graph algorithms", SIAM J. Comput. 1(2))."""
    index: dict[str, int] = {}
    low: dict[str, int] = {}
    stack: list[str] = []
    on: set[str] = set()
    comps: list[list[str]] = []

    def visit(v: str) -> None:
        index[v] = low[v] = len(index)
        stack.append(v)
        on.add(v)
        for w in sorted(graph.get(v, ())):
            if w not in index:
                visit(w)
                low[v] = min(low[v], low[w])
            elif w in on:
                low[v] = min(low[v], index[w])
        if low[v] == index[v]:
            comp = []
            while True:
                w = stack.pop()
                on.discard(w)
                comp.append(w)
                if w == v:
                    break
            if len(comp) > 1:
                comps.append(sorted(comp) + [sorted(comp)[0]])

    for v in sorted(graph):
        if v not in index:
            visit(v)
    return comps


def test_the_tree_keeps_the_import_rules():
    problems = violations(read_tree())
    assert problems == [], "\n".join(problems)


def test_every_module_belongs_to_a_layer():
    assert [m for m in read_tree() if not _group(m)] == []


@pytest.mark.parametrize("module, source, words", [
    ("caseprep.run.newthing", "from postproc.kernels.forces import integrate_forces\n",
     ("caseprep.run.newthing", "postproc.kernels.forces", "never imports postproc")),
    ("postproc.pipelines.newthing", "from caseprep.run import runner\n",
     ("postproc.pipelines.newthing", "caseprep.run.runner", "only caseprep.contract")),
    ("postproc.kernels.newthing", "import pyvista\n", ("postproc.kernels.newthing", "pyvista", "numpy, scipy")),
    ("postproc.kernels.newthing", "from postproc.io.surfaces import read_surface\n",
     ("postproc.kernels.newthing", "postproc.io.surfaces", "postproc.kernels may import only")),
    ("postproc.kernels.newthing", "from caseprep.contract.frames import rot_y\n",
     ("postproc.kernels.newthing", "caseprep.contract.frames", "postproc.kernels may import only")),
    ("postproc.report.newthing", "def f():\n    from postproc.kernels.mapfit import fit_map\n",
     ("postproc.report.newthing", "postproc.kernels.mapfit", "renders data")),
    ("caseprep.contract.newthing", "from caseprep.planning import spec\n",
     ("caseprep.contract.newthing", "caseprep.planning.spec", "caseprep.contract may import only")),
    ("postproc.io.newthing", "import click\n", ("postproc.io.newthing", "click", "only the CLI modules")),
])
def test_a_forbidden_import_fails_naming_both_modules(module, source, words):
    tree = dict(read_tree(), **{module: source})
    problems = [p for p in violations(tree) if p.startswith(module + " ")]
    assert len(problems) == 1, problems
    assert all(w in problems[0] for w in words), problems[0]


def test_a_cycle_fails_naming_its_modules():
    tree = dict(read_tree())
    tree["postproc.kernels.loop_a"] = "from postproc.kernels import loop_b\n"
    tree["postproc.kernels.loop_b"] = "from postproc.kernels.loop_a import x\n"
    problems = [p for p in violations(tree) if p.startswith("import cycle")]
    assert problems == ["import cycle: postproc.kernels.loop_a -> postproc.kernels.loop_b -> postproc.kernels.loop_a"]


def test_relative_imports_are_resolved():
    known = {"postproc.kernels.forces", "postproc.kernels.sections", "postproc.kernels"}
    got = imports_of("postproc.kernels.forces", "from .sections import x\nfrom . import sections\nfrom ..io import y\n",
                     False, known)
    assert got == {"postproc.kernels.sections", "postproc.io"}
