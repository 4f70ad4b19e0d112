"""Copy the contract tables from one warehouse to another (for example the sample into PostgreSQL).

>>> copy_warehouse("sample.duckdb", "postgresql+psycopg://postgres@127.0.0.1/test",
...                schema="garden")                                        # doctest: +SKIP
"""

from __future__ import annotations

from reachlist import statements
from reachlist.errors import StateError
from reachlist.schema import SOURCE_TABLES, Mapping
from reachlist.warehouse import Warehouse
from reachlist.wording import option


def copy_warehouse(
    source: str, dest: str, *, schema: str | None = None, replace: bool = False
) -> dict[str, int]:
    """Copy every source table of the contract; returns rows copied per table.

    The destination tables are named as in the contract, inside ``schema`` when given (map them
    with ``schema = "..."`` in a mapping file). Existing tables are only replaced with ``replace``.
    """
    copied: dict[str, int] = {}
    dest_mapping = Mapping.from_dict({"schema": schema} if schema else {})
    with Warehouse.open(source, read_only=True) as src, Warehouse.open(dest, dest_mapping) as dst:
        frames = {name: src.fetch(statements.contract_rows(name)) for name in SOURCE_TABLES}
        existing = [n for n in SOURCE_TABLES if dst.physical_columns(n) is not None]
        if existing and not replace:
            raise StateError(
                f"Destination {dst.display_name} already has {', '.join(existing)}"
                + (f" in schema {schema!r}" if schema else "")
                + "; nothing was copied.",
                hint=f"pass {option('replace=True')} to drop and reload them, or choose another {option('schema')}",
            )
        ddl: list[str] = []
        if schema:
            ddl.append(statements.create_schema(schema))
        for name in SOURCE_TABLES:
            physical = dst.mapping.table(name).physical
            ddl.append(statements.drop_table(physical))
            ddl.append(statements.create_table(physical, frames[name]))
        with dst.transaction():
            for stmt in ddl:
                dst.run_statement(stmt)
            for name in SOURCE_TABLES:
                dst.load_frame(name, frames[name])
                copied[name] = frames[name].height
    return copied
