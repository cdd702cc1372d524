"""The package's layers: every import points down or sideways within a subpackage, never up,
and no module imports itself back through others (issue 11).

The order, lowest first (docs/development.md, "Layout"): base modules (errors, version, atomic file
writes, the caution text), lensing, model, inference, forecast, hubble and lightcurves
(side by side, none importing another), io, report, the Python interface (api), the watch
(built on it), cli. The package's
``__init__`` is the public facade and may import any layer
but the command line.
"""

import ast
import pathlib

import pytest

PACKAGE = pathlib.Path(__file__).parent.parent / "lensdelay"
LAYERS = {
    "errors": 0,
    "version": 0,
    "atomic": 0,
    "cautions": 0,
    "dates": 0,
    "lensing": 1,
    "model": 2,
    "inference": 3,
    "forecast": 4,
    "hubble": 4,
    "lightcurves": 4,
    "io": 5,
    "report": 6,
    "api": 7,
    "watching": 8,
    "cli": 9,
}


def _module_name(path: pathlib.Path) -> str:
    parts = path.relative_to(PACKAGE.parent).with_suffix("").parts
    return ".".join(parts[:-1] if parts[-1] == "__init__" else parts)


def _report_methods(tree) -> set[int]:
    """ids of the import nodes inside methods called ``report``: a result's ``.report()``
    is a convenience that reaches up to :mod:`lensdelay.report` for its text (the one
    allowed exception, made lazily so that importing a result never loads the reports)."""
    allowed = set()
    for node in ast.walk(tree):
        if isinstance(node, ast.FunctionDef) and node.name == "report":
            allowed |= {
                id(n)
                for n in ast.walk(node)
                if isinstance(n, ast.ImportFrom) and (n.module or "").startswith("lensdelay.report")
            }
    return allowed


def _imports(path: pathlib.Path) -> set[str]:
    """Every lensdelay module imported anywhere in the file (function bodies included)."""
    tree = ast.parse(path.read_text())
    name = _module_name(path)
    package = name if path.name == "__init__.py" else name.rpartition(".")[0]
    allowed = _report_methods(tree)
    out = set()
    for node in ast.walk(tree):
        if id(node) in allowed:
            continue
        if isinstance(node, ast.Import):
            out |= {a.name for a in node.names if a.name.startswith("lensdelay")}
        elif isinstance(node, ast.ImportFrom):
            if node.level:
                base = package.split(".")
                base = base[: len(base) - node.level + 1]
                mod = ".".join(base + ([node.module] if node.module else []))
            else:
                mod = node.module or ""
            if mod.startswith("lensdelay"):
                out.add(mod)
                out |= {f"{mod}.{a.name}" for a in node.names}
    return out


def _graph() -> dict[str, set[str]]:
    files = {_module_name(p): p for p in PACKAGE.rglob("*.py")}
    graph = {}
    for name, path in files.items():
        graph[name] = {m for m in _imports(path) if m in files and m != name}
    return graph


def _layer(module: str) -> int | None:
    parts = module.split(".")
    return LAYERS.get(parts[1]) if len(parts) > 1 else None


def test_every_module_belongs_to_a_layer():
    for name in _graph():
        if name in ("lensdelay", "lensdelay.__main__"):
            continue
        assert _layer(name) is not None, f"{name} is in no layer"


def test_no_upward_or_sideways_imports():
    bad = []
    for name, targets in _graph().items():
        if name in ("lensdelay", "lensdelay.__main__"):
            continue
        own = _layer(name)
        for t in targets:
            if t == "lensdelay":
                bad.append(f"{name} imports the package facade")
                continue
            other = _layer(t)
            same_package = name.split(".")[1] == t.split(".")[1]
            if other > own or (other == own and not same_package):
                bad.append(f"{name} (layer {own}) imports {t} (layer {other})")
    assert not bad, "\n".join(sorted(bad))


def test_facade_does_not_import_the_command_line():
    assert not any(t.startswith("lensdelay.cli") for t in _graph()["lensdelay"])


def test_no_import_cycles():
    graph = _graph()
    state, stack, cycles = {}, [], []

    def visit(node):
        state[node] = 1
        stack.append(node)
        for t in graph.get(node, ()):
            if state.get(t) == 1:
                cycles.append(stack[stack.index(t) :] + [t])
            elif t not in state:
                visit(t)
        stack.pop()
        state[node] = 2

    for node in graph:
        if node not in state:
            visit(node)
    assert not cycles, "\n".join(" -> ".join(c) for c in cycles)


@pytest.mark.parametrize(
    "module", ["lensdelay", "lensdelay.forecast.pipeline", "lensdelay.report.figures"]
)
def test_importing_changes_no_global_state(module):
    """Importing the library leaves astropy's IERS settings, the warning filters and
    matplotlib's backend and emcee's logger alone (a fresh interpreter)."""
    import subprocess
    import sys

    # the libraries lensdelay builds on set filters of their own when first imported
    deps = (
        "numpy, scipy.linalg, scipy.optimize, scipy.interpolate, scipy.special, scipy.stats, "
        "scipy.sparse, astropy.table, astropy.coordinates, astropy.time, astropy.cosmology, "
        "emcee, lmfit, matplotlib.figure, matplotlib.dates, erfa"
    )
    code = (
        f"import {deps}\n"
        "import warnings, matplotlib, logging\n"
        "from astropy.utils import iers\n"
        "before = (iers.conf.auto_download, iers.conf.auto_max_age, list(warnings.filters), "
        "matplotlib.get_backend(), logging.getLogger('emcee').level)\n"
        f"import {module}\n"
        "after = (iers.conf.auto_download, iers.conf.auto_max_age, list(warnings.filters), "
        "matplotlib.get_backend(), logging.getLogger('emcee').level)\n"
        "assert before == after, (before, after)\n"
    )
    result = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True)
    assert result.returncode == 0, result.stderr


def test_public_names_do_not_shadow_subpackages():
    """``import lensdelay.forecast.pipeline`` must keep working next to the facade's names."""
    import lensdelay

    subpackages = {p.name for p in PACKAGE.iterdir() if p.is_dir() and (p / "__init__.py").exists()}
    assert not subpackages & set(lensdelay.__all__)
    assert len(lensdelay.__all__) == len(set(lensdelay.__all__))
    for name in lensdelay.__all__:
        assert hasattr(lensdelay, name), name


def test_the_command_line_imports_only_what_a_command_needs():
    """Building the parser (``lensdelay --help``) loads no numerical library: every
    sub-command imports its work when it runs (issue 27, start-up)."""
    import subprocess
    import sys

    heavy = ("astropy", "scipy", "matplotlib", "numba", "emcee", "lensdelay.api")
    code = (
        "import sys, lensdelay.cli.main as m; m.build_parser(); "
        f"print(sorted(n for n in {heavy!r} if n in sys.modules))"
    )
    out = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True, check=True)
    assert out.stdout.strip() == "[]"


def test_a_forecast_from_a_prepared_lens_loads_no_fitting_or_sampling_library():
    """Reading a prepared lens and forecasting from it needs neither lmfit nor emcee (nor
    scipy.stats, which both load): the alert path imports only what it uses."""
    import subprocess
    import sys

    code = (
        "import sys, lensdelay.io.prepared_files, lensdelay.forecast.pipeline, "
        "lensdelay.api; "
        "print(sorted(n for n in ('lmfit', 'emcee', 'scipy.stats') if n in sys.modules))"
    )
    out = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True, check=True)
    assert out.stdout.strip() == "[]"

