"""The layout shows the architecture (style.md §1): imports point inward only, each package's
allowed imports listed once below, and the domain core imports nothing but numpy and the standard
library (and numba in `compiled.py`) and never touches the file system."""

import ast
import sys
from pathlib import Path

import service

SERVICE = Path(service.__file__).parent

# What each part of `service/` may import from `service` itself. A part is a package (`domain`,
# `contract`, ...) or a top-level module (`config`, `errors`); `version` is `service.__version__`.
ALLOWED: dict[str, set[str]] = {
    "domain": {"domain"},
    "contract": {"contract", "domain", "errors"},
    "storage": {"storage", "errors"},
    "usecases": {"usecases", "contract", "domain", "storage", "config", "errors", "version"},
    "reports": {"reports"},
    "api": {"api", "usecases", "contract", "domain", "storage", "reports", "config", "errors", "version"},
    "cli": {"cli", "usecases", "contract", "domain", "storage", "reports", "config", "errors"},
    "config": set(),
    "errors": set(),
    "__init__": set(),
}
# The one place an edge reaches into another: the command line's `serve` starts the HTTP app.
EXCEPTIONS: dict[tuple[str, str], set[str]] = {("cli/commands.py", "serve"): {"api"}}

# The domain may import numpy and the standard library, less what touches files or the outside;
# numba in the one module it compiles (a sweep's pricing and choice, beside their numpy reference).
DOMAIN_THIRD_PARTY = {"numpy"}
DOMAIN_COMPILER = {"compiled.py": {"numba"}}
DOMAIN_FORBIDDEN_STDLIB = {"os", "pathlib", "io", "shutil", "tempfile", "glob", "sqlite3", "socket", "subprocess"}
FORBIDDEN_CALLS = {"open"}


def _part(relative: Path) -> str:
    """`domain/layout.py` → `domain`; `config.py` → `config`."""
    return relative.parts[0] if len(relative.parts) > 1 else relative.stem


def _service_target(node: ast.Import | ast.ImportFrom) -> list[str]:
    """The parts of `service` an import statement reaches."""
    if isinstance(node, ast.Import):
        names = [alias.name for alias in node.names]
    elif node.module == "service":
        return ["version" if alias.name == "__version__" else alias.name for alias in node.names]
    else:
        names = [node.module or ""]
    return [name.split(".")[1] for name in names if name.startswith("service.")]


def _imports_by_function(tree: ast.AST) -> list[tuple[str | None, ast.Import | ast.ImportFrom]]:
    """Every import with the name of the top-level function it sits in (None at module level)."""
    found: list[tuple[str | None, ast.Import | ast.ImportFrom]] = []
    for top in tree.body if isinstance(tree, ast.Module) else []:
        function = top.name if isinstance(top, ast.FunctionDef | ast.AsyncFunctionDef) else None
        found.extend((function, node) for node in ast.walk(top) if isinstance(node, ast.Import | ast.ImportFrom))
    return found


def wrong_imports(root: Path) -> list[str]:
    """`file:line imports service.X` for every import of `service` that the rules above forbid."""
    offenders = []
    for path in sorted(root.rglob("*.py")):
        relative = path.relative_to(root)
        if "migrations" in relative.parts:
            continue  # alembic's scripts are storage's own
        part = _part(relative)
        for function, node in _imports_by_function(ast.parse(path.read_text(encoding="utf-8"))):
            allowed = ALLOWED[part] | EXCEPTIONS.get((relative.as_posix(), function or ""), set())
            offenders.extend(f"{relative}:{node.lineno} imports service.{target}"
                             for target in _service_target(node) if target not in allowed)
    return offenders


def _top_level_modules(tree: ast.AST) -> set[str]:
    found = set()
    for node in ast.walk(tree):
        if isinstance(node, ast.Import):
            found.update(alias.name.split(".")[0] for alias in node.names)
        elif isinstance(node, ast.ImportFrom) and node.module and node.level == 0:
            found.add(node.module.split(".")[0])
    return found


def _domain_trees() -> dict[str, ast.AST]:
    return {path.name: ast.parse(path.read_text(encoding="utf-8"))
            for path in sorted((SERVICE / "domain").glob("*.py"))}


def test_every_part_of_the_service_imports_only_what_the_rules_allow() -> None:
    assert wrong_imports(SERVICE) == []


def test_every_part_of_the_service_has_a_rule() -> None:
    parts = {_part(p.relative_to(SERVICE)) for p in SERVICE.rglob("*.py")}
    assert parts <= set(ALLOWED)


def test_the_rules_catch_a_use_case_that_imports_the_http_layer(tmp_path: Path) -> None:
    (tmp_path / "usecases").mkdir()
    (tmp_path / "usecases" / "quotes.py").write_text("from service.api.observability import domain_metrics\n")
    (tmp_path / "contract").mkdir()
    (tmp_path / "contract" / "request.py").write_text("import numpy\n\ndef f():\n    import service.storage.tables\n")
    (tmp_path / "cli").mkdir()
    (tmp_path / "cli" / "commands.py").write_text(
        "def serve():\n    from service.api.app import create_app\n\ndef quote():\n    from service.api import deps\n")
    assert wrong_imports(tmp_path) == ["cli/commands.py:5 imports service.api",
                                       "contract/request.py:4 imports service.storage",
                                       "usecases/quotes.py:1 imports service.api"]


def test_the_domain_imports_only_numpy_the_standard_library_and_itself() -> None:
    allowed = (set(sys.stdlib_module_names) - DOMAIN_FORBIDDEN_STDLIB) | DOMAIN_THIRD_PARTY | {"service", "__future__"}
    offenders = {name: sorted(bad) for name, tree in _domain_trees().items()
                 if (bad := _top_level_modules(tree) - allowed - DOMAIN_COMPILER.get(name, set()))}
    assert offenders == {}


def test_the_domain_check_would_catch_a_forbidden_import() -> None:
    allowed = (set(sys.stdlib_module_names) - DOMAIN_FORBIDDEN_STDLIB) | DOMAIN_THIRD_PARTY
    tree = ast.parse("import numpy\nfrom pydantic import BaseModel\nimport os.path\nimport math\n")
    assert _top_level_modules(tree) - allowed == {"pydantic", "os"}


def test_the_domain_never_opens_files() -> None:
    calls = [f"{name}:{node.lineno}" for name, tree in _domain_trees().items() for node in ast.walk(tree)
             if isinstance(node, ast.Call) and isinstance(node.func, ast.Name) and node.func.id in FORBIDDEN_CALLS]
    assert calls == []


def test_the_domain_modules_stay_short() -> None:
    long = {p.name: n for p in (SERVICE / "domain").glob("*.py")
            if (n := len(p.read_text(encoding="utf-8").splitlines())) > 450}
    assert long == {}
