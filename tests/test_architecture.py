"""The layout shows the architecture: the domain core imports nothing from the web, validation or
storage libraries and never touches the file system (style.md §1)."""

import ast
from pathlib import Path

import service

DOMAIN = Path(service.__file__).parent / "domain"
FORBIDDEN_MODULES = {"fastapi", "starlette", "pydantic", "pydantic_settings", "sqlmodel", "sqlalchemy",
                     "alembic", "os", "pathlib", "io", "shutil", "tempfile", "glob", "sqlite3", "httpx",
                     "typer", "rich", "yaml", "babel"}
FORBIDDEN_CALLS = {"open"}


def _imports(tree: ast.AST) -> set[str]:
    found = set()
    for node in ast.walk(tree):
        if isinstance(node, ast.Import):
            found.update(alias.name.split(".")[0] for alias in node.names)
        elif isinstance(node, ast.ImportFrom) and node.module:
            found.add(node.module.split(".")[0])
    return found


def test_the_domain_imports_no_web_validation_storage_or_file_system_module() -> None:
    offenders = {}
    for path in sorted(DOMAIN.glob("*.py")):
        bad = _imports(ast.parse(path.read_text(encoding="utf-8"))) & FORBIDDEN_MODULES
        if bad:
            offenders[path.name] = sorted(bad)
    assert offenders == {}


def test_the_domain_never_opens_files() -> None:
    calls = []
    for path in sorted(DOMAIN.glob("*.py")):
        for node in ast.walk(ast.parse(path.read_text(encoding="utf-8"))):
            if isinstance(node, ast.Call) and isinstance(node.func, ast.Name) and node.func.id in FORBIDDEN_CALLS:
                calls.append(f"{path.name}:{node.lineno}")
    assert calls == []


def test_the_check_would_catch_a_forbidden_import() -> None:
    tree = ast.parse("import numpy\nfrom pydantic import BaseModel\nimport os.path\n")
    assert _imports(tree) & FORBIDDEN_MODULES == {"pydantic", "os"}


def test_the_domain_modules_stay_short() -> None:
    long = {p.name: n for p in DOMAIN.glob("*.py")
            if (n := len(p.read_text(encoding="utf-8").splitlines())) > 450}
    assert long == {}
