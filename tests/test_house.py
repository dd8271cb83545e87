"""The layout of the house: one-way layers, no import cycles, modules of bounded size.

The layers (DEVELOPERS.md): models <- sensitivity <- reports <- cli. ``models``
imports nothing of the others; ``sensitivity`` nothing of reports or cli;
``reports`` only the engine's io, errors and units, never the cli.
"""

from __future__ import annotations

import ast
from pathlib import Path

import pytest

ROOT = Path(__file__).resolve().parents[1]
PACKAGES = {"models": "models", "sensitivity": "sensitivity", "reports": "reports", "cli": "cli"}
MAX_LINES = 600

#: Which layers a layer may import (by top-level package under trapbudget).
ALLOWED: dict[str, set[str]] = {
    "models": {"models"},
    "sensitivity": {"models", "sensitivity"},
    "reports": {"reports"},
    "cli": {"models", "sensitivity", "reports", "cli"},
}
#: The engine modules the reports may use besides their own (io, errors, units).
REPORTS_MAY_USE = (
    "trapbudget.sensitivity",
    "trapbudget.sensitivity.io",
    "trapbudget.sensitivity.errors",
    "trapbudget.sensitivity.scenario",
    "trapbudget.sensitivity.scenario.units",
)


def module_name(path: Path, folder: Path, layer: str) -> str:
    parts = list(path.relative_to(folder).with_suffix("").parts)
    if parts[-1] == "__init__":
        parts = parts[:-1]
    return ".".join(["trapbudget", layer, *parts])


def _is_type_checking(node: ast.If) -> bool:
    test = node.test
    return (isinstance(test, ast.Name) and test.id == "TYPE_CHECKING") or (
        isinstance(test, ast.Attribute) and test.attr == "TYPE_CHECKING"
    )


def imports_of(
    source: str, module: str, known: frozenset[str] = frozenset()
) -> list[tuple[str, int]]:
    """Every trapbudget module imported anywhere in ``source`` (lazy ones too), with its line.

    Imports under ``if TYPE_CHECKING:`` never run and are left out.
    """
    tree = ast.parse(source)
    found: list[tuple[str, int]] = []
    package = module if module.endswith("__init__") else module.rsplit(".", 1)[0]

    def visit(node: ast.AST) -> None:
        if isinstance(node, ast.If) and _is_type_checking(node):
            for child in node.orelse:
                visit(child)
            return
        if isinstance(node, ast.Import):
            found.extend((a.name, node.lineno) for a in node.names)
        elif isinstance(node, ast.ImportFrom):
            base = node.module or ""
            if node.level:
                base = ".".join(package.split(".")[: len(package.split(".")) - node.level + 1])
                base = f"{base}.{node.module}" if node.module else base
            subs = [f"{base}.{a.name}" for a in node.names if f"{base}.{a.name}" in known]
            found.extend((name, node.lineno) for name in subs or [base])
        for child in ast.iter_child_nodes(node):
            visit(child)

    visit(tree)
    return [(name, line) for name, line in found if name.startswith("trapbudget.")]


def sources(root: Path = ROOT) -> dict[str, tuple[str, Path, str]]:
    """module name -> (layer, path, source) for every package module under ``root``."""
    out = {}
    for layer, folder in PACKAGES.items():
        base = root / folder
        for path in sorted(base.rglob("*.py")):
            out[module_name(path, base, layer)] = (layer, path, path.read_text(encoding="utf-8"))
    return out


def layer_violations(modules: dict[str, tuple[str, Path, str]]) -> list[str]:
    bad = []
    for name, (layer, path, source) in modules.items():
        for target, line in imports_of(source, name):
            target_layer = target.split(".")[1] if target.count(".") >= 1 else ""
            if target_layer not in PACKAGES:
                continue
            if layer == "reports" and target_layer == "sensitivity":
                if target in REPORTS_MAY_USE:
                    continue
                bad.append(f"{path.name}:{line}: reports imports {target}")
                continue
            if target_layer not in ALLOWED[layer]:
                bad.append(f"{path.name}:{line}: {layer} imports {target}")
    return bad


def test_layers_import_one_way():
    assert layer_violations(sources()) == []


def test_the_check_fails_on_a_planted_upward_import(tmp_path):
    # A synthetic package tree with one model module importing the engine: the check sees it.
    for folder in PACKAGES.values():
        (tmp_path / folder).mkdir()
        (tmp_path / folder / "__init__.py").write_text("")
    (tmp_path / "models" / "bad.py").write_text(
        "def f():\n    from trapbudget.sensitivity.ranking import rank\n    return rank\n"
    )
    (tmp_path / "reports" / "worse.py").write_text("import trapbudget.cli.main\n")
    found = layer_violations(sources(tmp_path))
    assert found == [
        "bad.py:2: models imports trapbudget.sensitivity.ranking",
        "worse.py:1: reports imports trapbudget.cli.main",
    ]


def test_no_import_cycles_even_lazy_ones():
    modules = sources()
    graph = {
        name: {
            t for t, _ in imports_of(src, name, frozenset(modules)) if t in modules and t != name
        }
        for name, (_, _, src) in modules.items()
    }
    state: dict[str, int] = {}
    stack: list[str] = []
    cycles: list[list[str]] = []

    def visit(node: str) -> None:
        state[node] = 1
        stack.append(node)
        for nxt in sorted(graph[node]):
            if state.get(nxt) == 1:
                cycles.append([*stack[stack.index(nxt) :], nxt])
            elif nxt not in state:
                visit(nxt)
        stack.pop()
        state[node] = 2

    for name in sorted(graph):
        if name not in state:
            visit(name)
    assert cycles == []


@pytest.mark.parametrize("layer", sorted(PACKAGES))
def test_modules_stay_small(layer):
    big = {
        path.name: n
        for path in (ROOT / PACKAGES[layer]).rglob("*.py")
        if (n := len(path.read_text(encoding="utf-8").splitlines())) > MAX_LINES
    }
    assert big == {}, f"split these modules by concern (limit {MAX_LINES} lines): {big}"


@pytest.mark.parametrize("layer", sorted(PACKAGES))
def test_packages_ship_type_information(layer):
    assert (ROOT / PACKAGES[layer] / "py.typed").is_file()


def test_the_projects_warnings_are_errors_in_the_suite_wherever_attributed():
    # pyproject's filterwarnings is by category: a model-validity warning attributed to the
    # caller's module (stacklevel) still fails a test that did not expect it.
    import scipy.stats as st

    from trapbudget.models import VaporCellMOT
    from trapbudget.sensitivity import ModelValidityWarning, propagate

    blue = {"detuning": st.uniform(1e6, 1e6)}  # blue of resonance: no trap, flagged
    with pytest.raises(ModelValidityWarning, match=r"fell outside the validity"):
        propagate(VaporCellMOT(), blue, n_samples=16, rng=0)


HEAVY = ("numba", "matplotlib", "xarray", "SALib", "scipy.stats")


@pytest.mark.parametrize(
    "argv",
    [["--version"], ["--help"], ["rank"], ["rank", "{bad}"], ["predict", "{missing}"]],
)
def test_usage_and_input_errors_answer_without_heavy_imports(tmp_path, argv):
    # Fast start: what a typo costs is the interpreter and the parser, not numba or matplotlib.
    import subprocess
    import sys

    bad = tmp_path / "bad.toml"
    bad.write_text('[scenario]\ntitle = "typo"\n[inputs.beam_powr]\nnominal = "4 mW"\n')
    argv = [a.format(bad=bad, missing=tmp_path / "missing.toml") for a in argv]
    code = (
        "import sys\nfrom trapbudget.cli.main import main\n"
        f"try:\n    main({argv!r})\nexcept SystemExit:\n    pass\n"
        f"print('HEAVY:' + ','.join(m for m in {HEAVY!r} if m in sys.modules))"
    )
    out = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True, timeout=120)
    line = [x for x in out.stdout.splitlines() if x.startswith("HEAVY:")][-1]
    assert line == "HEAVY:", (argv, line, out.stderr[-500:])
