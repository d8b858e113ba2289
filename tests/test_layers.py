"""Presentation stays on top: no computation package imports chipflow.report.

The rule is read from the sources (every import statement, at module level or inside a
function), so a lazy import inside a function breaks it as surely as one at the top. The one
exception is a ``_repr_html_`` method: the notebook's display hook is presentation by
definition, runs only when a notebook asks for it, and keeps the package usable without it.
"""

from __future__ import annotations

import ast
from pathlib import Path

import pytest

ROOT = Path(__file__).resolve().parents[1]
COMPUTATION = (
    "physics", "design", "layout", "network", "field", "checks", "operation", "variation",
    "transport",
)  # fmt: skip
PRESENTATION = "chipflow.report"


def _imports(tree: ast.AST, module: str):
    """(line, imported module, enclosing function) of every import in ``tree``."""

    def visit(node: ast.AST, function: str | None):
        for child in ast.iter_child_nodes(node):
            inner = (
                child.name
                if isinstance(child, ast.FunctionDef | ast.AsyncFunctionDef)
                else (function)
            )
            if isinstance(child, ast.Import):
                for alias in child.names:
                    yield child.lineno, alias.name, function
            elif isinstance(child, ast.ImportFrom):
                base = child.module or ""
                if child.level:  # relative: resolve against the importing module's package
                    parts = module.split(".")[: -child.level]
                    base = ".".join([*parts, base] if base else parts)
                yield child.lineno, base, function
                for alias in child.names:  # "from chipflow import report"
                    yield child.lineno, f"{base}.{alias.name}", function
            yield from visit(child, inner)

    yield from visit(tree, None)


def _offences(package: Path, dotted: str) -> list[str]:
    out = []
    for path in sorted(package.rglob("*.py")):
        module = ".".join([dotted, *path.relative_to(package).with_suffix("").parts])
        tree = ast.parse(path.read_text(encoding="utf-8"), str(path))
        for line, name, function in _imports(tree, module):
            if name == PRESENTATION or name.startswith(PRESENTATION + "."):
                where = f"{path.relative_to(package.parent)}:{line}"
                if function != "_repr_html_" and not any(o.startswith(where) for o in out):
                    out.append(f"{where} imports {name}")
    return out


@pytest.mark.parametrize("name", COMPUTATION)
def test_no_computation_package_imports_the_report(name: str) -> None:
    package = ROOT / "chipflow" / name
    if not package.is_dir():
        pytest.skip(f"chipflow/{name} does not exist yet")
    assert _offences(package, f"chipflow.{name}") == []


def test_the_rule_catches_every_form_of_import(tmp_path: Path) -> None:
    # the checker itself must see top-level, lazy, relative and "from chipflow import" forms
    package = tmp_path / "pkg"
    package.mkdir()
    (package / "a.py").write_text("import chipflow.report.html\n")
    (package / "b.py").write_text("def f():\n    from chipflow.report.figures import x\n")
    (package / "c.py").write_text("from chipflow import report\n")
    (package / "d.py").write_text(
        "class A:\n    def _repr_html_(self):\n        import chipflow.report\n"
    )
    (package / "e.py").write_text("from ..report import console\n")
    found = _offences(package, "chipflow.pkg")
    assert [f.split("/")[-1].split(":")[0] for f in found] == ["a.py", "b.py", "c.py", "e.py"]
