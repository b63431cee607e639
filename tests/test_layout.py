"""The house rules of the source layout: stages import only from earlier stages, files and
functions stay small, and the tests run against the installed package."""

import ast
import subprocess
import sys
from pathlib import Path

import pytest

import halo
import halo.cli

ROOT = Path(__file__).resolve().parents[1]
SRC = Path(halo.__file__).resolve().parent  # the package the tests import
CLI = Path(halo.cli.__file__).resolve().parent  # cli/ in the checkout, installed as halo.cli

#: the stages in data-flow order; a module may import from its own stage or an earlier one
STAGES = (
    "core",
    "physics",
    "inputs",
    "mock",
    "inference",
    "results",
    "products",
    "pipeline",
    "workspace",
    "batch",
    "cli",
)
MAX_FILE_LINES = 400
MAX_FUNCTION_LINES = 60


def _stage_of(module):
    """Stage of a dotted module name inside halo (None for the package root and others)."""
    parts = module.split(".")
    if parts[0] != "halo" or len(parts) < 2:
        return None
    return parts[1] if parts[1] in STAGES else None


def _imports(tree, module):
    """Every halo module a file imports, lazy imports inside functions included."""
    out = []
    package = module.rsplit(".", 1)[0]
    for node in ast.walk(tree):
        if isinstance(node, ast.Import):
            out += [(a.name, node.lineno) for a in node.names]
        elif isinstance(node, ast.ImportFrom):
            base = node.module or ""
            if node.level:
                base = ".".join(package.split(".")[: len(package.split(".")) - node.level + 1])
                base = f"{base}.{node.module}" if node.module else base
            out.append((base, node.lineno))
            out += [(f"{base}.{a.name}", node.lineno) for a in node.names]
    return out


def _package_files():
    seen = set()
    for base, prefix in ((SRC, ("halo",)), (CLI, ("halo", "cli"))):
        for path in sorted(base.rglob("*.py")):
            if path in seen:
                continue
            seen.add(path)
            rel = path.relative_to(base).with_suffix("")
            yield path, ".".join(prefix + rel.parts)


def test_every_stage_is_a_subpackage():
    found = {p.name for p in SRC.iterdir() if (p / "__init__.py").is_file()}
    assert set(STAGES) - {"cli"} <= found, set(STAGES) - {"cli"} - found
    assert found - {"cli", "models"} <= set(STAGES), found - set(STAGES)


def test_the_checker_reads_the_cli():
    modules = {m for _, m in _package_files()}
    assert "halo.cli.app" in modules and "halo.physics.jeans" in modules


def test_no_module_imports_from_a_later_stage():
    bad = []
    for path, module in _package_files():
        stage = _stage_of(module)
        if stage is None:
            continue
        tree = ast.parse(path.read_text(encoding="utf-8"))
        for name, line in _imports(tree, module):
            other = _stage_of(name)
            if other is not None and STAGES.index(other) > STAGES.index(stage):
                bad.append(f"{module}:{line} imports {name} ({stage} < {other})")
    assert not bad, "\n".join(bad)


def test_the_checker_sees_a_late_import():
    # a lazy import of a later stage inside a function is found too
    tree = ast.parse("def f():\n    from halo.products.plots import make_figures\n")
    names = [n for n, _ in _imports(tree, "halo.physics.jeans")]
    assert "halo.products.plots" in names
    assert STAGES.index(_stage_of(names[0])) > STAGES.index("physics")


def _body_lines(node):
    body = node.body
    doc = 0
    if body and isinstance(body[0], ast.Expr) and isinstance(body[0].value, ast.Constant):
        if isinstance(body[0].value.value, str):
            doc = body[0].end_lineno - body[0].lineno + 1
    return node.end_lineno - node.lineno + 1 - doc


def _python_files():
    seen = set()
    for folder in (SRC, CLI, ROOT / "tests", ROOT / "benchmarks"):
        for path in sorted(folder.rglob("*.py")) if folder.is_dir() else ():
            if path.resolve() not in seen:
                seen.add(path.resolve())
                yield path


def test_files_and_functions_stay_small():
    long_files, long_functions = [], []
    for path in _python_files():
        text = path.read_text(encoding="utf-8")
        n = len(text.splitlines())
        if n > MAX_FILE_LINES:
            long_files.append(f"{path.parent.name}/{path.name}: {n} lines")
        for node in ast.walk(ast.parse(text)):
            if isinstance(node, ast.FunctionDef | ast.AsyncFunctionDef):
                m = _body_lines(node)
                if m > MAX_FUNCTION_LINES:
                    long_functions.append(
                        f"{path.parent.name}/{path.name}:{node.lineno} {node.name}: {m}"
                    )
    assert not long_files, long_files
    assert not long_functions, long_functions


def test_tests_import_the_installed_package():
    # the package lives under src/, so no folder named halo at the top of the checkout can
    # shadow the installed halo (whose CLI is installed from cli/ as halo.cli)
    assert not (ROOT / "halo").exists()
    assert (CLI / "app.py").is_file()
    # either the installed copy (site-packages, possibly of a .venv inside the checkout) or, in
    # an editable install, src/halo; never a folder of the checkout's top level
    assert SRC == (ROOT / "src" / "halo").resolve() or "site-packages" in SRC.parts


def test_module_cli_runs_from_the_checkout():
    # `python -m halo.cli` from the top of the checkout finds the installed package
    res = subprocess.run(
        [sys.executable, "-m", "halo.cli", "--help"],
        cwd=ROOT,
        capture_output=True,
        text=True,
        timeout=120,
    )
    assert res.returncode == 0, res.stderr[-1000:]
    assert "fit" in res.stdout


@pytest.mark.parametrize("stage", [s for s in STAGES if s != "cli"])
def test_stage_has_a_docstring(stage):
    init = SRC / stage / "__init__.py"
    doc = ast.get_docstring(ast.parse(init.read_text(encoding="utf-8")))
    assert doc and len(doc) > 40, (
        f"{stage}/__init__.py needs a docstring saying what the stage does"
    )
