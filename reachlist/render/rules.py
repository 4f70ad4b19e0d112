"""Rendering of `reachlist rules`: a table readable at 100 columns, plus JSON and CSV."""

from __future__ import annotations

import json
import math
from typing import Any

import polars as pl
from rich.console import Console
from rich.table import Table


def _num(x: float | None, digits: int = 3) -> str:
    if x is None or (isinstance(x, float) and math.isnan(x)):
        return "-"
    if math.isinf(x):
        return "inf"
    return f"{x:.{digits}f}"


def _p(x: float) -> str:
    return "<1e-99" if x < 1e-99 else (f"{x:.1e}" if x < 0.001 else f"{x:.3f}")


NARROW = 100
"""Below this many columns the rules table drops n(X), supp and p adj (all stay in --json and
--csv) so the antecedent keeps its room."""


def rules_table(
    frame: pl.DataFrame, title: str, *, limit: int | None = None, width: int | None = None
) -> Table:
    rows = frame if limit is None else frame.head(limit)
    narrow = width is not None and width < NARROW
    show_consequent = frame["consequent"].n_unique() > 1
    t = Table(title=title, title_justify="left", show_edge=False, pad_edge=False, expand=True)
    t.add_column("id", style="dim", no_wrap=True)
    t.add_column("antecedent", overflow="fold", ratio=2, min_width=20)
    if show_consequent:
        t.add_column("-> consequent", overflow="fold", ratio=1, min_width=12)
    # With a consequent column there is no room at 100 columns for support and conviction
    # (they stay in --json/--csv).
    breadth = (
        not show_consequent
        and "breadth_lift" in frame.columns
        and bool(frame["breadth_lift"].is_not_null().any())
    )
    # b.lift (added value over breadth) takes conviction's place at 100 columns.
    measures = (
        ("n(X)", "n(X+y)", "conf", "lift", "p adj", "sig")
        if show_consequent
        else (
            "n(X)",
            "n(X+y)",
            "supp",
            "conf",
            "lift",
            "b.lift" if breadth else "conv",
            "p adj",
            "sig",
        )
    )
    dropped = {"n(X)", "supp", "p adj"} if narrow else set()
    for name in measures:
        if name not in dropped:
            t.add_column(name, justify="right", no_wrap=True)
    for r in rows.iter_rows(named=True):
        cells = [r["rule_id"], " + ".join(r["antecedent"])]
        if show_consequent:
            cells.append(r["consequent"])
        cells += [f"{r['n_antecedent']:,}", f"{r['n_both']:,}"]
        if not show_consequent:
            cells.append(_num(r["support"], 4))
        cells += [_num(r["confidence"]), _num(r["lift"], 2)]
        if breadth:
            cells.append(_num(r["breadth_lift"], 2))
        elif not show_consequent:
            cells.append(_num(r["conviction"], 2))
        cells += [
            _p(r["p_adjusted"]),
            "[bold green]*[/]" if r["significant"] else "[yellow]ns[/]",
        ]
        if narrow:
            names = ["id", "antecedent", *(["-> consequent"] if show_consequent else []), *measures]
            cells = [c for c, n in zip(cells, names, strict=True) if n not in dropped]
        t.add_row(*cells)
    return t


def render_rules(
    frame: pl.DataFrame, console: Console, *, title: str, footer: list[str], limit: int
) -> None:
    console.print(rules_table(frame, title, limit=limit, width=console.width))
    shown = min(limit, frame.height)
    console.print(f"[dim]{shown} of {frame.height:,} rules shown (--top to change).[/]")
    for line in footer:
        console.print(line)


def _clean(value: Any) -> Any:
    if isinstance(value, float) and (math.isinf(value) or math.isnan(value)):
        return None
    return value


def rules_json(frame: pl.DataFrame, meta: dict[str, Any]) -> str:
    """JSON for machines: numbers are numbers; a value that is not finite (conviction of a rule
    that always holds is infinite) is null, and ``conviction_infinite`` says which."""
    rules = []
    for row in frame.iter_rows(named=True):
        conviction = row.get("conviction")
        clean = {k: _clean(v) for k, v in row.items()}
        if "conviction" in row:
            clean["conviction_infinite"] = isinstance(conviction, float) and math.isinf(conviction)
        rules.append(clean)
    return json.dumps({**meta, "rules": rules}, indent=2, default=str)


def rules_csv_frame(frame: pl.DataFrame) -> pl.DataFrame:
    """One CSV-safe frame: the antecedent list joined with ' + '."""
    return frame.with_columns(pl.col("antecedent").list.join(" + "))
