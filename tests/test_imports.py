"""Import hygiene: every module imports on its own, and phasemap's modules form no import cycle.

Common practice, no source: a cycle between modules (even one held together by imports inside
functions) means two modules each need the other, so neither can be understood or tested
alone; the data flow of DEVELOPERS.md runs one way.
"""

import ast
import pkgutil
import subprocess
import sys
from pathlib import Path

import pytest

import phasemap

ROOT = Path(phasemap.__file__).parent


def _modules():
    return sorted(m.name for m in pkgutil.walk_packages([str(ROOT)], prefix="phasemap."))


def _target(mod: str, is_pkg: bool, node) -> list[str]:
    """Fully qualified phasemap modules imported by an import node of module ``mod``."""
    out = []
    if isinstance(node, ast.Import):
        out = [a.name for a in node.names]
    elif isinstance(node, ast.ImportFrom):
        if node.level:
            base = mod.split(".")
            base = base if is_pkg else base[:-1]
            base = base[: len(base) - (node.level - 1)]
            head = ".".join(base + ([node.module] if node.module else []))
        else:
            head = node.module or ""
        out = [head] + [f"{head}.{a.name}" for a in node.names]
    return [x for x in out if x.startswith("phasemap")]


def _graph():
    mods = set(_modules()) | {"phasemap"}
    g = {}
    for mod in mods:
        path = ROOT.joinpath(*mod.split(".")[1:])
        is_pkg = path.is_dir()
        file = path / "__init__.py" if is_pkg else path.with_suffix(".py")
        tree = ast.parse(file.read_text())
        deps = set()
        for node in ast.walk(tree):
            for t in _target(mod, is_pkg, node):
                if t in mods and t != mod and not mod.startswith(t + "."):  # a package's own parents
                    deps.add(t)
        g[mod] = deps
    return g


def _cycle(g):
    """One cycle of the graph (list of modules) or None (iterative DFS with colours)."""
    colour = {m: 0 for m in g}
    for start in g:
        if colour[start]:
            continue
        stack = [(start, iter(sorted(g[start])))]
        path = [start]
        colour[start] = 1
        while stack:
            node, it = stack[-1]
            nxt = next(it, None)
            if nxt is None:
                colour[node] = 2
                stack.pop()
                path.pop()
            elif colour[nxt] == 1:
                return path[path.index(nxt):] + [nxt]
            elif colour[nxt] == 0:
                colour[nxt] = 1
                stack.append((nxt, iter(sorted(g[nxt]))))
                path.append(nxt)
    return None


def test_no_import_cycle():
    # packages import their submodules (phasemap.ed -> phasemap.ed.solve); a submodule importing
    # its own package's public names would be a cycle, so edges to a parent package are ignored
    assert _cycle(_graph()) is None, " -> ".join(_cycle(_graph()))


def test_cycle_detector_finds_a_planted_cycle():
    assert _cycle({"a": {"b"}, "b": {"c"}, "c": {"a"}}) == ["a", "b", "c", "a"]
    assert _cycle({"a": {"b"}, "b": set()}) is None


def test_library_never_imports_the_cli():
    g = _graph()
    bad = [(m, d) for m, ds in g.items() for d in ds
           if not m.startswith("phasemap.cli") and m != "phasemap.__main__" and d.startswith("phasemap.cli")]
    assert not bad, bad


def test_plots_never_solve():
    g = _graph()
    solvers = ("phasemap.mf", "phasemap.cmf.selfconsistency", "phasemap.ed.groundstate", "phasemap.ed.solve",
               "phasemap.ed.staircase", "phasemap.scan", "phasemap.api", "phasemap.methods")
    plots = [m for m in g if m.endswith("plot") or m.endswith("plots")]
    bad = [(m, d) for m in plots for d in g[m] if d.startswith(solvers)]
    assert not bad, bad


def test_every_module_imports_on_its_own():
    from concurrent.futures import ThreadPoolExecutor

    def imp(mod):
        r = subprocess.run([sys.executable, "-c", f"import {mod}"], capture_output=True, text=True,
                           cwd=str(ROOT.parent))
        return mod, r.returncode, r.stderr[-1500:]

    with ThreadPoolExecutor(4) as ex:
        bad = [(m, err) for m, rc, err in ex.map(imp, _modules()) if rc != 0]
    assert not bad, bad


def test_every_imported_package_is_declared():
    """Third-party packages imported anywhere in phasemap are dependencies in pyproject.toml."""
    import tomllib

    pyproject = ROOT.parent / "pyproject.toml"
    if not pyproject.exists():
        pytest.skip("not running from a source checkout")
    meta = tomllib.loads(pyproject.read_text())["project"]
    declared = {d.split(">")[0].split("=")[0].split("<")[0].split("[")[0].strip().lower().replace("-", "_")
                for d in meta["dependencies"]}
    for extra in meta.get("optional-dependencies", {}).values():
        declared |= {d.split(">")[0].split("=")[0].split("[")[0].strip().lower().replace("-", "_") for d in extra}
    stdlib = set(sys.stdlib_module_names)
    used = set()
    for file in ROOT.rglob("*.py"):
        for node in ast.walk(ast.parse(file.read_text())):
            names = []
            if isinstance(node, ast.Import):
                names = [a.name for a in node.names]
            elif isinstance(node, ast.ImportFrom) and not node.level and node.module:
                names = [node.module]
            used |= {n.split(".")[0] for n in names}
    third = {u for u in used if u not in stdlib and u != "phasemap"}
    missing = sorted(u for u in third if u.lower() not in declared)
    assert not missing, f"imported but not declared in pyproject.toml: {missing}"
