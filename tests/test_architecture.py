"""The package's shape, checked on every run (issue: one architecture a newcomer
can walk): the import contract of ``pyproject.toml`` (layers import only
downward, no cycles inside a layer, the library never imports the command line),
module and function sizes, and the version written once."""
from __future__ import annotations

import ast
import re
import shutil
import subprocess
import sys
from pathlib import Path

import pytest

ROOT = Path(__file__).resolve().parent.parent
PACKAGE = ROOT / "specpar"
MAX_MODULE_LINES = 500
MAX_FUNCTION_LINES = 60


def _modules():
    return sorted(PACKAGE.rglob("*.py"))


def test_import_contract_holds():
    pytest.importorskip("importlinter")
    exe = shutil.which("lint-imports", path=str(Path(sys.executable).parent)) or shutil.which("lint-imports")
    assert exe, "lint-imports (import-linter) is not installed"
    run = subprocess.run([exe, "--config", str(ROOT / "pyproject.toml")], cwd=ROOT,
                         capture_output=True, text=True)
    assert run.returncode == 0, run.stdout[-3000:] + run.stderr[-2000:]


def test_no_module_over_500_lines():
    long = {str(p.relative_to(ROOT)): n for p in _modules()
            if (n := len(p.read_text().splitlines())) > MAX_MODULE_LINES}
    assert not long, long


def _body_lines(node) -> int:
    body = node.body
    first = body[0]
    is_doc = (isinstance(first, ast.Expr) and isinstance(first.value, ast.Constant)
              and isinstance(first.value.value, str))
    start = body[1] if is_doc and len(body) > 1 else first
    return node.end_lineno - start.lineno + 1


def test_no_function_over_60_lines_of_body():
    """Counted from the first statement after the docstring to the last line."""
    long = {}
    for path in _modules():
        for node in ast.walk(ast.parse(path.read_text())):
            if isinstance(node, (ast.FunctionDef, ast.AsyncFunctionDef)) and _body_lines(node) > MAX_FUNCTION_LINES:
                long[f"{path.relative_to(ROOT)}:{node.lineno} {node.name}"] = _body_lines(node)
    assert not long, long


def test_version_written_once():
    """pyproject.toml holds the version; the code reads it from the package metadata."""
    import specpar
    from importlib import metadata
    assert specpar.__version__ == metadata.version("specpar")
    pattern = re.compile(r"""(__version__|VERSION)\s*=\s*["']\d+\.\d+""")
    written = [str(p.relative_to(ROOT)) for p in _modules() if pattern.search(p.read_text())]
    assert not written, written
