"""The layers of the package, enforced on the imports each module makes (see DEVELOPERS.md,
"Architecture"): the CLI on top, then the renderers, then the library core, with the statistics
and the database engines at the bottom."""

from __future__ import annotations

import ast
from pathlib import Path

import pytest

PACKAGE = Path(__file__).parents[1] / "reachlist"
DATABASE_DRIVERS = ("duckdb", "sqlalchemy", "psycopg", "pyspark")
TERMINAL = ("rich", "click")


def _modules() -> dict[str, set[str]]:
    """Module name -> every module it imports (at any depth of the file)."""
    found: dict[str, set[str]] = {}
    for path in sorted(PACKAGE.rglob("*.py")):
        parts = path.relative_to(PACKAGE.parent).with_suffix("").parts
        name = ".".join(parts[:-1] if parts[-1] == "__init__" else parts)
        imports: set[str] = set()
        for node in ast.walk(ast.parse(path.read_text(encoding="utf-8"))):
            if isinstance(node, ast.Import):
                imports.update(alias.name for alias in node.names)
            elif isinstance(node, ast.ImportFrom) and node.module and node.level == 0:
                imports.add(node.module)
                imports.update(f"{node.module}.{alias.name}" for alias in node.names)
        found[name] = imports
    return found


MODULES = _modules()


def _layer(module: str) -> str:
    if module.startswith("reachlist.cli"):
        return "cli"
    if module.startswith("reachlist.render"):
        return "render"
    if module.startswith("reachlist.stats"):
        return "stats"
    if module.startswith("reachlist.engines") or module == "reachlist.warehouse":
        return "engine"
    return "core"


def _top(name: str) -> str:
    return name.split(".")[0]


@pytest.mark.parametrize("module", sorted(MODULES))
def test_module_imports_only_what_its_layer_may(module: str) -> None:
    layer = _layer(module)
    imports = MODULES[module]
    reachlist = {i for i in imports if i.startswith("reachlist.")}
    wrong: list[str] = []
    if layer != "cli":
        wrong += [i for i in reachlist if _layer(i) == "cli"]
    if layer in ("core", "stats", "engine"):
        wrong += [i for i in reachlist if _layer(i) == "render"]
        wrong += [i for i in imports if _top(i) in TERMINAL]
    if layer == "stats":
        wrong += [
            i for i in reachlist if _layer(i) != "stats" and not i.startswith("reachlist.errors")
        ]
    if layer != "engine":
        wrong += [i for i in imports if _top(i) in DATABASE_DRIVERS]
    assert not wrong, f"{module} ({layer} layer) imports {sorted(set(wrong))}"


# Where SQL text may be written: templates in sql/, and the modules that build statements from
# parts (query rendering, the audience query's parts, statements over physical names).
SQL_BUILDERS = ("reachlist.query", "reachlist.audience", "reachlist.statements")
_SQL_START = ("SELECT ", "WITH ", "INSERT ", "UPDATE ", "DELETE ", "CREATE ", "DROP ", "ALTER ")


def _sql_literals(path: Path) -> list[str]:
    """String constants (and f-string heads) of a module that begin like a SQL statement (the
    project writes SQL keywords in capitals)."""
    found = []
    for node in ast.walk(ast.parse(path.read_text(encoding="utf-8"))):
        text = None
        if isinstance(node, ast.Constant) and isinstance(node.value, str):
            text = node.value
        elif isinstance(node, ast.JoinedStr) and node.values:
            head = node.values[0]
            if isinstance(head, ast.Constant) and isinstance(head.value, str):
                text = head.value
        if text and text.lstrip().startswith(_SQL_START) and "\n>>>" not in text:
            found.append(f"line {node.lineno}: {text.strip()[:40]!r}")
    return found


@pytest.mark.parametrize("module", sorted(m for m in MODULES if m not in SQL_BUILDERS))
def test_sql_lives_in_templates_or_the_statement_builders(module: str) -> None:
    path = PACKAGE.parent / (module.replace(".", "/") + ".py")
    if not path.exists():
        path = PACKAGE.parent / module.replace(".", "/") / "__init__.py"
    found = _sql_literals(path)
    assert not found, (
        f"{module} writes SQL inline (move it to sql/ or reachlist.statements): {found}"
    )
