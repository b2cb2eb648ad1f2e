"""The package layout keeps its import rule (contributor guide, "Layout").

Stages, from the top: command line > workflow > outputs (figures, report, export) > results of a
test (tensile) > accuracy (metrology) > sequence > 3-D (stereo) > matching and strain > ground
(images, field types, errors, files, TOML text). A module imports only from its own stage or
stages below it; nothing imports the command line; there is no import circle; no module imports
another module's underscore names, nor a private module of another package; no module but the
compiled kernels is longer than 800 lines. Checked on the source text with the standard
library's ``ast`` (common practice, no source).
"""

from __future__ import annotations

import ast
from pathlib import Path

import pytest

PKG = Path(__file__).resolve().parents[1] / "dic"

# stage rank: a module may import modules of equal or lower rank
RANK = {
    "cli": 90, "workflow": 80, "figures": 70, "report": 70, "export": 70, "view": 75,
    "tensile": 60, "metrology": 50, "sequence": 40, "stereo": 35, "matching": 30,
    "strain": 30, "images": 20, "field": 10, "errors": 10, "files": 10, "tomlfile": 10,
    "lazy": 10, "_version": 10, "limits": 10,
    "__init__": 100, "__main__": 100,
}
KERNELS = {"_icgn_kernel.py"}
MAX_LINES = 800


def _module_name(path: Path) -> str:
    rel = path.relative_to(PKG.parent).with_suffix("")
    parts = list(rel.parts)
    if parts[-1] == "__init__":
        parts = parts[:-1]
    return ".".join(parts)


def _modules() -> dict[str, Path]:
    return {_module_name(p): p for p in sorted(PKG.rglob("*.py"))}


def _stage(mod: str) -> str:
    parts = mod.split(".")
    return parts[1] if len(parts) > 1 else "__init__"


def _package(mod: str, path: Path) -> str:
    return mod if path.name == "__init__.py" else mod.rsplit(".", 1)[0]


def _imports(mod: str, path: Path):
    """(imported module, imported names, line) for every import of a ``dic`` module."""
    tree = ast.parse(path.read_text(encoding="utf-8"))
    pkg = _package(mod, path)
    found = []
    for node in ast.walk(tree):
        if isinstance(node, ast.Import):
            for a in node.names:
                if a.name.split(".")[0] == "dic":
                    found.append((a.name, [], node.lineno))
        elif isinstance(node, ast.ImportFrom):
            if node.level:
                base = pkg.split(".")[: len(pkg.split(".")) - (node.level - 1)]
                target = ".".join(base + ([node.module] if node.module else []))
            else:
                target = node.module or ""
            if target.split(".")[0] != "dic":
                continue
            names = [a.name for a in node.names]
            found.append((target, names, node.lineno))
    return found


def _resolve(target: str, names: list[str], modules: dict) -> list[tuple[str, list[str]]]:
    """Split ``from pkg import sub`` into imports of the sub-modules themselves."""
    out, plain = [], []
    for n in names:
        if f"{target}.{n}" in modules:
            out.append((f"{target}.{n}", []))
        else:
            plain.append(n)
    if plain or not names:
        out.append((target, plain))
    return out


def _graph():
    modules = _modules()
    edges = {}
    for mod, path in modules.items():
        for target, names, line in _imports(mod, path):
            for t, ns in _resolve(target, names, modules):
                edges.setdefault(mod, []).append((t, ns, line))
    return modules, edges


def test_no_module_outside_the_command_line_imports_it():
    modules, edges = _graph()
    bad = [f"{m}:{line} imports {t}" for m, es in edges.items() for t, _, line in es
           if _stage(t) == "cli" and _stage(m) not in ("cli", "__main__")]
    assert not bad, "\n".join(bad)


def test_imports_run_downward():
    modules, edges = _graph()
    bad = []
    for m, es in edges.items():
        rm = RANK[_stage(m)]
        for t, _, line in es:
            if t == "dic":
                continue
            if RANK[_stage(t)] > rm:
                bad.append(f"{m}:{line} imports {t} (stage {_stage(t)} is above {_stage(m)})")
    assert not bad, "\n".join(bad)


def test_no_import_circle():
    modules, edges = _graph()
    graph = {m: sorted({t for t, _, _ in edges.get(m, []) if t in modules and t != m})
             for m in modules}
    # a package's __init__ that only re-exports its own modules is part of that package
    state, stack, cycles = {}, [], []

    def visit(n):
        state[n] = 1
        stack.append(n)
        for t in graph[n]:
            if t == "dic":
                continue
            if state.get(t) == 1:
                cycles.append(stack[stack.index(t):] + [t])
            elif t not in state:
                visit(t)
        stack.pop()
        state[n] = 2

    for m in graph:
        if m not in state:
            visit(m)
    # a package importing its own sub-module from __init__ while that module imports the
    # package's public names is a circle too; none is allowed
    assert not cycles, "\n".join(" -> ".join(c) for c in cycles)


def test_no_import_of_private_names_from_another_module():
    modules, edges = _graph()
    bad = []
    # ``from pkg import _module`` takes a private name from the package, even for its own
    # modules: import the names needed from the private module instead
    for m, path in modules.items():
        for target, names, line in _imports(m, path):
            bad += [f"{m}:{line} takes private name {n} from {target}" for n in names
                    if n.startswith("_") and not n.startswith("__") and n != "__version__"]
    for m, es in edges.items():
        mpkg = _package(m, modules[m])
        for t, names, line in es:
            leaf = t.rsplit(".", 1)[-1]
            tpkg = t.rsplit(".", 1)[0]
            if leaf.startswith("_") and not leaf.startswith("__") and tpkg != mpkg:
                bad.append(f"{m}:{line} imports private module {t}")
            for n in names:
                if n.startswith("_") and not n.startswith("__"):
                    bad.append(f"{m}:{line} imports private name {n} from {t}")
    assert not bad, "\n".join(bad)


@pytest.mark.parametrize("path", sorted(PKG.rglob("*.py")), ids=lambda p: str(p.relative_to(PKG)))
def test_modules_stay_small(path):
    if path.name in KERNELS:
        return
    n = len(path.read_text(encoding="utf-8").splitlines())
    assert n <= MAX_LINES, f"{path.relative_to(PKG)} has {n} lines (at most {MAX_LINES})"


def test_public_api_reaches_every_stage():
    # the public names of the package keep working after the restructure (common practice,
    # no source: a stable public API)
    import dic

    for name in ("correlate", "read_image", "make_roi", "strain_field", "StrainField", "track",
                 "load_results", "tensile_results", "gauge_histories"):
        assert callable(getattr(dic, name)), name
    assert callable(dic.synth.render) and callable(dic.io.read_image)
    assert callable(dic.tensile.tensile_from_results) and callable(dic.tensile.axial_line)
    assert callable(dic.sequence.Results.open) and callable(dic.workflow.load_analysis)
    assert callable(dic.figures.strain_map) and callable(dic.metrology.self_check)
    assert callable(dic.stereo.calibrate)
