"""domain/ stays pure: stdlib, numpy and pydantic only (STYLE.md, layers)."""

import ast
import sys
from pathlib import Path

import domain

FORBIDDEN = {"server", "fastapi", "sqlalchemy", "starlette", "jinja2", "alembic", "uvicorn", "httpx"}
ALLOWED = set(sys.stdlib_module_names) | {"numpy", "pydantic", "domain", "__future__"}


def imported_roots(source: str) -> set[str]:
    """Top-level package names imported by a module's source (relative imports are domain's own)."""
    roots = set()
    for node in ast.walk(ast.parse(source)):
        if isinstance(node, ast.Import):
            roots.update(alias.name.split(".")[0] for alias in node.names)
        elif isinstance(node, ast.ImportFrom) and node.level == 0 and node.module:
            roots.add(node.module.split(".")[0])
    return roots


def test_the_checker_sees_imports():
    # Guard against a vacuous test: the walker must catch each import form.
    assert imported_roots("import fastapi\nfrom sqlalchemy.orm import Session\nfrom . import x") == {
        "fastapi",
        "sqlalchemy",
    }
    assert imported_roots("def f():\n    import server.app\n") == {"server"}


def test_domain_imports_only_stdlib_numpy_pydantic():
    files = sorted(Path(domain.__file__).parent.rglob("*.py"))
    assert files, "no domain modules found"
    for path in files:
        roots = imported_roots(path.read_text(encoding="utf-8"))
        assert not roots & FORBIDDEN, f"{path.name} imports {sorted(roots & FORBIDDEN)}"
        assert roots <= ALLOWED, f"{path.name} imports {sorted(roots - ALLOWED)}"
