"""The warehouse contract: check, mapping files and every bad-input case."""

from __future__ import annotations

import io
import json
import shutil
from datetime import date
from pathlib import Path

import duckdb
import pytest
from click.testing import CliRunner
from rich.console import Console

from reachlist.check import check_warehouse
from reachlist.cli import main
from reachlist.errors import InputError, WarehouseError
from reachlist.render.check import render_check
from reachlist.schema import Mapping
from reachlist.warehouse import Warehouse
from tests import handmade as hm

PRODUCTS = [hm.product("A"), hm.product("B"), hm.product("C", age_restricted=True)]
CUSTOMERS = [hm.customer(1), hm.customer(2, consent=False), hm.customer(3, birth=None)]
PURCHASES = [
    (1, "2025-01-05", "A", 1),
    (1, "2025-01-05", "A", 1),  # exact duplicate line
    (1, "2025-02-01", "A", -1),  # a return
    (2, "2025-03-01", "B", 2),
    (3, "2025-04-01", "ZZZ-UNKNOWN", 1),  # SKU missing from products
]


@pytest.fixture
def tiny(tmp_path: Path) -> Path:
    return hm.build(
        tmp_path / "tiny.duckdb",
        customers=CUSTOMERS,
        products=PRODUCTS,
        purchases=PURCHASES,
        suppressions=[(3, "asked", None)],
    )


def test_check_counts_rows_and_quirks(tiny: Path) -> None:
    with Warehouse.open(tiny) as wh:
        c = check_warehouse(wh).counts
    assert (c["customers"], c["products"], c["orders"], c["order_lines"]) == (3, 3, 4, 5)
    assert c["return_lines"] == 1
    assert c["duplicate_lines"] == 1
    assert (c["unknown_sku_lines"], c["unknown_skus"]) == (1, 1)
    assert c["customers_without_consent"] == 1
    assert c["customers_age_unknown"] == 1
    assert c["customers_suppressed"] == 1
    assert c["age_restricted_products"] == 1
    assert c["products_never_sold"] == 1  # C
    assert c["products_ungrouped"] == 0
    assert str(c["first_order_at"]).startswith("2025-01-05")


def test_foreign_names_pass_through_a_mapping_file(tmp_path: Path) -> None:
    names = {"customers": "shopper", "orders": "till_receipt", "order_lines": "receipt_row"}
    path = hm.build(
        tmp_path / "foreign.duckdb",
        customers=CUSTOMERS,
        products=PRODUCTS,
        purchases=PURCHASES,
        names=names,
    )
    con = duckdb.connect(str(path))
    con.execute("CREATE SCHEMA crm")
    con.execute("ALTER TABLE shopper RENAME COLUMN marketing_consent TO opt_in")
    con.execute("CREATE TABLE crm.shopper AS SELECT * FROM shopper")
    con.execute("DROP TABLE shopper")
    con.execute("ALTER TABLE receipt_row RENAME COLUMN sku TO article_code")
    con.close()
    mapping = tmp_path / "map.toml"
    mapping.write_text(
        '[customers]\ntable = "crm.shopper"\nmarketing_consent = "opt_in"\n\n'
        '[orders]\ntable = "till_receipt"\n\n'
        '[order_lines]\ntable = "receipt_row"\nsku = "article_code"\n'
    )
    with Warehouse.open(path, Mapping.from_toml(mapping)) as wh:
        c = check_warehouse(wh).counts
    assert (c["customers"], c["order_lines"], c["unknown_sku_lines"]) == (3, 5, 1)
    assert c["customers_without_consent"] == 1
    result = CliRunner().invoke(main, ["check", "-w", str(path), "-m", str(mapping)])
    assert result.exit_code == 0, result.output
    assert "crm.shopper" in result.output


def _problems(path: Path, mapping: Mapping | None = None) -> list:
    with Warehouse.open(path, mapping) as wh:
        report = check_warehouse(wh)
    assert not report.ok
    return report.problems


def _text(p) -> str:
    return f"{p.what} | {p.where} | {p.found} | {p.fix}"


def test_missing_table_names_table_and_mapping_key(tiny: Path) -> None:
    con = duckdb.connect(str(tiny))
    con.execute("DROP TABLE suppressions")
    con.close()
    (p,) = _problems(tiny)
    assert p.what == "missing table" and "suppressions" in p.where
    assert "[suppressions] table" in p.fix


def test_missing_column_names_column_and_mapping_key(tiny: Path) -> None:
    con = duckdb.connect(str(tiny))
    con.execute("ALTER TABLE orders RENAME COLUMN ordered_at TO placed")
    con.close()
    (p,) = _problems(tiny)
    assert "orders.ordered_at" in p.where and "[orders] ordered_at" in p.fix and "placed" in p.found


def test_wrong_type_names_expected_and_found(tiny: Path) -> None:
    con = duckdb.connect(str(tiny))
    con.execute("ALTER TABLE products ALTER stock_on_hand TYPE VARCHAR")
    con.close()
    (p,) = _problems(tiny)
    assert "products.stock_on_hand" in p.where and "integers" in p.found and "VARCHAR" in p.found


def test_every_problem_in_one_run(tiny: Path) -> None:
    con = duckdb.connect(str(tiny))
    con.execute("DROP TABLE suppressions")
    con.execute("ALTER TABLE orders RENAME COLUMN ordered_at TO placed")
    con.execute("ALTER TABLE products ALTER stock_on_hand TYPE VARCHAR")
    con.execute("ALTER TABLE customers RENAME COLUMN region TO area")
    con.close()
    problems = _problems(tiny)
    assert sorted(p.what for p in problems) == [
        "missing column",
        "missing column",
        "missing table",
        "wrong type",
    ]
    with Warehouse.open(tiny) as wh:
        buf = io.StringIO()
        render_check(check_warehouse(wh), Console(file=buf, width=80))
    assert max(len(line) for line in buf.getvalue().splitlines()) <= 80
    assert all(w in buf.getvalue() for w in ("wrong type", "area", "placed", "suppressions"))
    result = CliRunner().invoke(main, ["check", "-w", str(tiny)])
    assert result.exit_code == 4
    assert "Traceback" not in result.output
    assert "4 error(s)" in result.output
    last = [ln for ln in result.output.splitlines() if ln.strip()][-1]
    assert last.startswith("Error:") and "4 error(s)" in last


def test_missing_file_and_unreachable_url() -> None:
    with pytest.raises(InputError, match="does not exist"):
        Warehouse.open("/nonexistent/dir/w.duckdb")
    with pytest.raises(WarehouseError, match="Cannot reach"):
        Warehouse.open("postgresql+psycopg://nobody@127.0.0.1:1/none?connect_timeout=2")
    with pytest.raises(WarehouseError, match="Cannot use"):
        Warehouse.open("nosuchdriver://x/y")


@pytest.mark.parametrize(
    ("text", "expected"),
    [
        ("[custmers]\ntable='x'\n", "did you mean 'customers'"),
        ("[orders]\norderd_at='x'\n", "did you mean 'ordered_at'"),
        ("[orders]\ntable=3\n", "non-empty string"),
        ("[orders\n", "not valid TOML"),
        ("orders = 'x'\n", "must be a table"),
    ],
)
def test_bad_mapping_files(tmp_path: Path, text: str, expected: str) -> None:
    p = tmp_path / "m.toml"
    p.write_text(text)
    with pytest.raises(InputError, match=expected):
        Mapping.from_toml(p)


def test_cli_lists_problems_and_exits_with_the_warehouse_code(tiny: Path) -> None:
    con = duckdb.connect(str(tiny))
    con.execute("DROP TABLE products")
    con.close()
    result = CliRunner().invoke(main, ["check", "-w", str(tiny)])
    assert result.exit_code == 4
    assert "missing" in result.output and "your_table" in result.output
    assert "Traceback" not in result.output


def test_postgres_gives_the_same_counts(
    tiny: Path, pg_url: str, pg_schema: str, tmp_path: Path
) -> None:
    from reachlist.transfer import copy_warehouse

    copied = copy_warehouse(str(tiny), pg_url, schema=pg_schema)
    assert copied["order_lines"] == 5
    with Warehouse.open(tiny) as wh:
        expected = check_warehouse(wh).counts
    with Warehouse.open(pg_url, Mapping.from_dict({"schema": pg_schema})) as wh:
        got = check_warehouse(wh).counts
    assert {k: v for k, v in got.items() if "order_at" not in k} == {
        k: v for k, v in expected.items() if "order_at" not in k
    }
    assert str(got["first_order_at"]) == str(expected["first_order_at"])
    from reachlist.errors import StateError

    with pytest.raises(StateError, match="replace=True"):
        copy_warehouse(str(tiny), pg_url, schema=pg_schema)


def test_cli_sample_writes_and_refuses_to_overwrite(tmp_path: Path) -> None:
    out = tmp_path / "s.duckdb"
    runner = CliRunner()
    first = runner.invoke(main, ["sample", "--out", str(out), "--customers", "600"])
    assert first.exit_code == 0, first.output
    assert "600 customers" in first.output and out.exists()
    again = runner.invoke(main, ["sample", "--out", str(out), "--customers", "600"])
    assert again.exit_code == 2 and "Error:" in again.output
    checked = runner.invoke(main, ["check", "-w", str(out)])
    assert checked.exit_code == 0 and "Data quirks" in checked.output


def test_check_finds_what_the_lists_would_trip_on(tiny: Path) -> None:
    """Duplicate customer rows, rows without ids, orders in the future and far from the rest
    (a typed year), each reported with what was found, in one run."""
    con = duckdb.connect(str(tiny))
    con.execute("INSERT INTO customers SELECT * FROM customers WHERE customer_id = 2")
    con.execute("INSERT INTO customers (customer_id) VALUES (NULL)")
    con.execute("INSERT INTO orders VALUES (900, 1, TIMESTAMP '2062-05-01 10:00', 'web')")
    con.execute("INSERT INTO orders VALUES (901, 1, TIMESTAMP '1970-01-01 00:00', 'web')")
    con.execute("INSERT INTO orders VALUES (902, NULL, TIMESTAMP '2025-03-03 00:00', 'web')")
    con.execute("INSERT INTO orders VALUES (903, 1, NULL, 'web')")
    con.execute("INSERT INTO order_lines VALUES (903, 'A', NULL, 1.0)")
    con.close()
    with Warehouse.open(tiny) as wh:
        report = check_warehouse(wh, today=date(2026, 12, 3))
    found = {p.what: p for p in report.problems}
    assert found["duplicate customer ids"].severity == "error" and not report.ok
    assert found["duplicate customer ids"].found == "1 ids on 2 rows"
    assert found["missing ids"].found == "1 rows without one"
    gaps = {p.where: p for p in report.problems if p.what == "missing values"}
    assert set(gaps) == {"orders.ordered_at", "order_lines.quantity"}
    assert all(p.severity == "warning" and p.found == "1 rows without one" for p in gaps.values())
    assert found["orders without a customer"].found == "1 orders"
    assert "1 after 2026-12-03, the latest 2062-05-01" in found["orders in the future"].found
    far = [p for p in report.problems if p.what == "orders far from the rest"]
    assert sorted(p.found.split(" in ")[1].split(";")[0] for p in far) == ["1970-01", "2062-05"]


def test_a_clean_warehouse_has_no_problems(tiny: Path) -> None:
    with Warehouse.open(tiny) as wh:
        report = check_warehouse(wh, today=date(2026, 12, 3))
    assert report.ok and report.problems == [] and report.casts == []


def test_the_readme_lists_every_column_of_the_contract() -> None:
    """The README's contract table names every logical column with its type."""
    from reachlist.schema import CONTRACT

    readme = (Path(__file__).parents[1] / "README.md").read_text()
    rows = {
        tuple(c.strip() for c in line.strip("|").split("|")[:3])
        for line in readme.splitlines()
        if line.startswith("| ")
    }
    for table in CONTRACT.values():
        for col in table.columns:
            if table.owned:
                assert any(r[0] == table.name and col.name in r[1] for r in rows), col.name
            else:
                assert any(
                    r[:2] == (table.name, col.name) and r[2].startswith(col.kind) for r in rows
                ), (table.name, col.name, col.kind)


def _sizes(path: Path, *more: str) -> tuple[int, str]:
    res = CliRunner().invoke(
        main, ["--width", "200", "sizes", "SG04-104", "-w", str(path), "--no-estimate", *more]
    )
    return res.exit_code, res.output


def test_lists_refuse_what_check_marks_as_stopping_them(pristine: Path, tmp_path: Path) -> None:
    """Consent held as integer codes (1 yes, 0 no, 2 withdrawn): DuckDB would read every
    non-zero code as consent, so the 2s were listed. Lists now refuse it in one line, as check
    does, naming the values-that-mean-yes fix; with that mapping line the list is the one of the
    boolean column. Mining does not read customers, so `rules` still runs."""
    coded = tmp_path / "coded.duckdb"
    shutil.copy(pristine, coded)
    con = duckdb.connect(str(coded))
    con.execute("ALTER TABLE customers ALTER marketing_consent TYPE INTEGER")
    con.execute("UPDATE customers SET marketing_consent = 2 WHERE marketing_consent = 0")
    ((withdrawn,),) = con.sql(
        "SELECT count(*) FROM customers WHERE marketing_consent = 2"
    ).fetchall()
    con.close()
    assert withdrawn > 0
    code, out = _sizes(coded)
    assert code != 0
    (line,) = out.strip().splitlines()
    assert "customers.marketing_consent" in line and "type INTEGER; expected true/false" in line
    assert "values that mean yes" in line and "reachlist check" in line
    # the same codes through a mapped expression (no column type to read): refused too
    passed_on = tmp_path / "passed_on.toml"
    passed_on.write_text('[customers]\nmarketing_consent = { sql = "marketing_consent + 0" }\n')
    code, out = _sizes(coded, "-m", str(passed_on))
    assert code != 0 and "customers.marketing_consent" in out and "expected true/false" in out
    assert "values that mean yes" in out
    fixed = tmp_path / "consent.toml"
    fixed.write_text('[customers]\nmarketing_consent = { sql = "marketing_consent = 1" }\n')
    code, mapped = _sizes(coded, "-m", str(fixed), "--json")
    code0, plain = _sizes(pristine, "--json")
    assert code == 0 and code0 == 0, mapped + plain
    assert json.loads(mapped)["waterfall"] == json.loads(plain)["waterfall"]
    rules = CliRunner().invoke(main, ["rules", "SG04-104", "-w", str(coded), "--top", "3"])
    assert rules.exit_code == 0, rules.output


def test_mining_refuses_order_times_held_as_text(pristine: Path, tmp_path: Path) -> None:
    """Order times as text: `rules` failed inside a query with the database's binder error; it
    now says in one line which column, what it holds and the mapping line that casts it."""
    texty = tmp_path / "texty.duckdb"
    shutil.copy(pristine, texty)
    con = duckdb.connect(str(texty))
    con.execute("ALTER TABLE orders ALTER ordered_at TYPE VARCHAR")
    con.close()
    res = CliRunner().invoke(main, ["--width", "200", "rules", "SG04-104", "-w", str(texty)])
    assert res.exit_code != 0
    (line,) = res.output.strip().splitlines()
    assert "orders.ordered_at: type VARCHAR; expected timestamps" in line
    assert 'ordered_at = { sql = "CAST(ordered_at AS ...)" }' in line and "Binder" not in line
