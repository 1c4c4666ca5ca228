"""The package's layout (DEVELOPERS.md, "Layout"): imports flow one way, and the
tests mirror the package.

The top level of `gatescope` is read in data-flow order; every module may import
only modules before it (or itself). Capabilities built on the pipeline are
subpackages that may import the whole top level and the capabilities before them,
and that nothing at the top level imports; the command line sits above all.
"""

from __future__ import annotations

import ast
from pathlib import Path

import pytest

PACKAGE = Path(__file__).resolve().parents[1] / "engine" / "gatescope"
TESTS = Path(__file__).resolve().parent

#: The top level, in data-flow order (a module may import those before it).
CORE = ["errors", "options", "fileio", "checksum", "resources", "provenance", "progress", "parallel", "conventions",
        "channels", "kernels", "reader", "model", "likelihood", "projection", "estimators",
        "merit", "intervals", "bootstrap", "profile", "diagnostics", "checks", "result_file", "result", "pipeline",
        "summary", "export", "__init__"]
#: Capabilities, in the order they may build on each other.
CAPABILITIES = ["synth", "batch", "report", "bench"]
#: The entry points, above everything.
ENTRY = ["cli", "__main__"]
ORDER = CORE + CAPABILITIES + ENTRY


def _unit(module: str) -> str:
    """The layer a dotted module name belongs to (``gatescope.merit.process`` → merit)."""
    parts = module.split(".")
    assert parts[0] == "gatescope", module
    return "__init__" if len(parts) == 1 else parts[1]


def _module_name(path: Path) -> str:
    rel = path.relative_to(PACKAGE.parent).with_suffix("")
    parts = list(rel.parts)
    if parts[-1] == "__init__":
        parts = parts[:-1]
    return ".".join(parts)


def _is_module(dotted: str) -> bool:
    path = PACKAGE.parent.joinpath(*dotted.split("."))
    return path.with_suffix(".py").exists() or (path / "__init__.py").exists()


def _imports(path: Path):
    """Every gatescope module that ``path`` imports, at the top or inside a function."""
    return _imports_of(path.read_text(encoding="utf-8"), _module_name(path),
                       path.name == "__init__.py")


def _imports_of(source: str, module: str, is_package: bool):
    """(line, gatescope module) for every import in ``source``, relative ones resolved."""
    package = module if is_package else module.rsplit(".", 1)[0]
    for node in ast.walk(ast.parse(source)):
        if isinstance(node, ast.Import):
            for alias in node.names:
                if alias.name.split(".")[0] == "gatescope":
                    yield node.lineno, alias.name
        elif isinstance(node, ast.ImportFrom):
            if node.level:
                base = package.split(".")
                base = base[:len(base) - (node.level - 1)]
                target = ".".join(base + ([node.module] if node.module else []))
            else:
                target = node.module or ""
            if target.split(".")[0] != "gatescope":
                continue
            if node.module is None or target == "gatescope":
                # `from . import x` may name modules: check each one that is a module
                for alias in node.names:
                    sub = f"{target}.{alias.name}"
                    yield node.lineno, sub if _is_module(sub) else target
            else:
                yield node.lineno, target


def _package_files():
    return sorted(p for p in PACKAGE.rglob("*.py") if "__pycache__" not in p.parts)


def test_every_module_has_a_layer():
    units = {_unit(_module_name(p)) for p in _package_files()}
    assert units <= set(ORDER), f"modules without a layer in this test: {units - set(ORDER)}"


@pytest.mark.parametrize("path", _package_files(), ids=lambda p: str(p.relative_to(PACKAGE)))
def test_imports_flow_one_way(path):
    mine = _unit(_module_name(path))
    for line, target in _imports(path):
        theirs = _unit(target)
        assert ORDER.index(theirs) <= ORDER.index(mine), (
            f"{path.relative_to(PACKAGE)}:{line} imports {target} ({theirs}), "
            f"a layer above {mine}")


def test_the_check_sees_upward_imports_anywhere():
    # relative imports inside functions, and `from . import x`, are found and resolved:
    # otherwise the test above could not fail
    source = ("from .channels import dim_of_choi\n"
              "def late():\n    from .pipeline import fit\n    from . import cli\n")
    found = [target for _, target in _imports_of(source, "gatescope.model", False)]
    assert found == ["gatescope.channels", "gatescope.pipeline", "gatescope.cli"]
    found = [t for _, t in _imports_of("from ..result import Result\n",
                                       "gatescope.synth.simulate", False)]
    assert found == ["gatescope.result"]


#: Modules without a test module of their own, and why.
NO_OWN_TESTS = {
    "estimators/base.py": "the Fit record; tests/estimators/test_battery.py checks every field "
                          "of every estimator's Fit",
}
#: Test modules that are not the mirror of one module (beside reference/ and scenarios/).
EXTRA_TESTS = {"estimators/test_battery.py", "test_layout.py", "test_fuzz.py"}


def test_every_module_has_its_test_module():
    missing = []
    for path in _package_files():
        rel = path.relative_to(PACKAGE)
        if path.name in ("__init__.py", "__main__.py") or str(rel) in NO_OWN_TESTS:
            continue
        expected = TESTS / rel.parent / f"test_{path.name}"
        if not expected.exists():
            missing.append(str(expected.relative_to(TESTS)))
    assert not missing, f"modules without a mirrored test module: {missing}"


def test_every_test_module_mirrors_a_module():
    stray = []
    for path in sorted(TESTS.rglob("test_*.py")):
        rel = path.relative_to(TESTS)
        if rel.parts[0] in ("reference", "scenarios") or str(rel) in EXTRA_TESTS:
            continue
        source = PACKAGE / rel.parent / path.name[len("test_"):]
        if not source.exists():
            stray.append(str(rel))
    assert not stray, f"test modules that mirror no module: {stray}"
