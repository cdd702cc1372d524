"""The forecast and inference wings stay readable (issue 29's goals): no module over 500
lines and no function over 80 lines of code (its docstring not counted), save the
exceptions named here with the reason."""

import ast
import pathlib

import pytest

ROOT = pathlib.Path(__file__).parent.parent / "lensdelay"
WINGS = ("forecast", "inference")
#: Modules allowed beyond 500 lines, and why.
LONG_MODULES = {
    # one class whose methods share each parameter row's predicted images (predict,
    # residuals, the log posterior and its pieces); its layout (parameters.py) and its
    # Jacobian (information.py) already live apart
    "inference/likelihood.py": 720,
}


def _modules():
    return sorted(p for wing in WINGS for p in (ROOT / wing).glob("*.py"))


@pytest.mark.parametrize("path", _modules(), ids=lambda p: f"{p.parent.name}/{p.name}")
def test_module_and_function_sizes(path):
    name = f"{path.parent.name}/{path.name}"
    source = path.read_text()
    assert len(source.splitlines()) <= LONG_MODULES.get(name, 500), name
    for node in ast.walk(ast.parse(source)):
        if isinstance(node, (ast.FunctionDef, ast.AsyncFunctionDef)):
            length = node.end_lineno - node.lineno + 1
            first = node.body[0]
            if isinstance(first, ast.Expr) and isinstance(first.value, ast.Constant):
                length -= first.end_lineno - first.lineno + 1
            assert length <= 80, f"{name}: {node.name} has {length} lines of code"
