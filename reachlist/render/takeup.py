"""Take-up in the terminal and as files: estimates, backtests, campaign results, gains charts.

The gains chart is drawn twice from the same points (``reachlist.stats.gains_chart_points``): as
text for the terminal, and as a self-contained SVG written by hand (no plotting dependency).
"""

from __future__ import annotations

import json
import math
from html import escape as html_escape
from pathlib import Path
from typing import Any

import polars as pl
from rich.console import Console
from rich.markup import escape
from rich.table import Table

from reachlist.backtest import Backtest
from reachlist.errors import InputError
from reachlist.estimate import HoldoutPlanning, TakeUpReport
from reachlist.render import fmt_expected
from reachlist.results import CampaignResults, GroupTakeUp
from reachlist.stats.calibration import TakeUpEstimate

__all__ = [
    "gains_chart_text",
    "gains_svg",
    "render_backtest",
    "render_estimate",
    "render_holdout_planning",
    "render_results",
    "to_json",
    "write_chart",
]


def _pct(x: float | Any, digits: int = 2) -> str:
    if x is None or not math.isfinite(float(x)):
        return "-"
    return f"{100 * float(x):.{digits}f}%"


def estimate_lines(r: TakeUpReport) -> list[str]:
    e = r.expected
    units = r.expected_units
    av = r.added_value
    lines = [
        (
            f"[bold]Baseline take-up (without the offer):[/] {fmt_expected(e.expected)} of {r.audience:,} "
            "customers buy "
            f"{escape(str(r.target))} within {r.horizon_days} days ({_pct(r.rate)}); "
            f"{e.level:.0%} interval {fmt_expected(e.low)}-{fmt_expected(e.high)}, from the spread of "
            f"{e.n_backtests} past backtests ({escape(e.method)})."
        ),
        (
            f"Expected units: {fmt_expected(units[0])} ({fmt_expected(units[1])}-"
            f"{fmt_expected(units[2])}) at "
            f"{r.units_per_buyer:.2f} units per new buyer."
        ),
        (
            f"Breadth-matched rate {_pct(r.breadth_matched_rate)}; base rate outside the "
            f"audience {_pct(r.base_rate)}; everyone lacking the target {_pct(r.overall_rate)} "
            f"(cutoff {r.calibration_cutoff:%Y-%m-%d}, {r.cutoffs} cutoffs, calibration factor "
            f"{e.factor:.2f})."
        ),
    ]
    if av is not None:
        lines.append(
            f"Added value over breadth: x{av.estimate:.2f} (95% CI {av.low:.2f}-{av.high:.2f}; "
            f"x{av.crude:.2f} before matching on breadth); applied with weight "
            f"{r.weight.weight:.2f} ({escape(r.weight.reason)})."
        )
    return lines


def few_cutoffs_line(e: TakeUpEstimate) -> str:
    """Said whenever an estimate rests on fewer than FEW_CUTOFFS independent cutoffs."""
    m = e.n_cutoffs or e.n_backtests
    return (
        f"[yellow]Rests on few:[/] {m} past cutoff{'s' if m != 1 else ''} (backtests at one "
        "cutoff count once), so the interval is the wide one and the calibration factor is "
        "pulled toward 1; a longer history or a shorter horizon gives more."
    )


def render_estimate(r: TakeUpReport, console: Console) -> None:
    for line in estimate_lines(r):
        console.print(line, soft_wrap=False)
    if r.expected.rests_on_few:
        console.print(few_cutoffs_line(r.expected), soft_wrap=False)
    if r.already_hold:
        console.print(
            f"[dim]{r.already_hold:,} given customers already hold the target and "
            "are not counted.[/]",
            soft_wrap=False,
        )


def render_holdout_planning(p: HoldoutPlanning, console: Console) -> None:
    for line in p.lines():
        console.print(f"[bold]Holdout:[/] {escape(line)}", soft_wrap=False)


def backtest_table(bt: Backtest, width: int | None = None) -> Table:
    """Below 100 columns the table is narrower: whole numbers, no box edges, and the naive and
    base columns left to --json, so no number is cut."""
    narrow = width is not None and width < 100
    level = bt.combined.estimate.expected.level
    t = Table(
        title=f"Backtest for {escape(str(bt.target))}: cutoff {bt.cutoff:%Y-%m-%d}, "
        f"{bt.horizon_days}-day horizon",
        title_justify="left",
        show_edge=not narrow,
        pad_edge=not narrow,
    )
    columns = [
        "audience",
        "n",
        "pred.",
        f"{level:.0%} int.",
        "obs.",
        "naive",
        "breadth",
        "base",
        "breadth_lift",
    ]
    if narrow:
        columns = [c for c in columns if c not in ("naive", "base")]
    for col in columns:
        if col == "audience":
            t.add_column(col, overflow="fold", ratio=1, min_width=10)
        else:
            t.add_column(col, justify="right", no_wrap=True)
    digits = 0 if narrow else 1
    for r in bt.rows:
        e = r.estimate.expected
        av = r.estimate.added_value
        name = r.label if r.rule is None else " + ".join(r.rule.antecedent)
        cells = {
            "audience": escape(name),
            "n": f"{r.customers:,}",
            "pred.": f"{r.predicted:,.{digits}f}",
            f"{level:.0%} int.": f"{e.low:,.{digits}f}-{e.high:,.{digits}f}",
            "obs.": f"{r.observed:,}" + ("" if r.covered else " !"),
            "naive": f"{r.naive:,.1f}",
            "breadth": _pct(r.estimate.breadth_matched_rate),
            "base": _pct(r.estimate.base_rate),
            "breadth_lift": "-" if av is None else f"x{av.estimate:.2f}",
        }
        t.add_row(*(cells[c] for c in columns))
    return t


def gains_rich_table(gains: pl.DataFrame) -> Table:
    t = Table(title="Gains by score decile (combined list)", title_justify="left")
    for col in ("decile", "customers", "buyers", "rate", "lift", "cum. share of buyers"):
        t.add_column(col, justify="right")
    for row in gains.iter_rows(named=True):
        t.add_row(
            str(row["group"]),
            f"{row['customers']:,}",
            f"{row['buyers']:,.0f}",
            _pct(row["rate"]),
            f"{row['lift']:.2f}",
            _pct(row["cum_share_buyers"], 0),
        )
    return t


def render_backtest(bt: Backtest, console: Console, *, chart: bool = True) -> None:
    console.print(backtest_table(bt, width=console.width))
    c = bt.combined
    console.print(
        f"pred.: calibrated breadth-matched estimate from {c.estimate.expected.n_backtests} "
        f"earlier backtests; naive: rule confidence taken as take-up (a co-purchase rate, "
        f"shown to compare); observed base rate outside the list {_pct(bt.base_rate)}; "
        "breadth: breadth-matched rate; base: rate outside the rule's audience; breadth_lift: "
        "added value over breadth; ! = outside the interval. Rules mined in "
        f"{bt.window}; nothing after the cutoff was read except to observe buyers.",
        soft_wrap=False,
        style="dim",
    )
    if bt.gains.height:
        console.print(gains_rich_table(bt.gains))
        if chart:
            console.print(gains_chart_text(bt.chart_points()), markup=False, highlight=False)


def _group_row(t: Table, g: GroupTakeUp) -> None:
    t.add_row(
        g.group,
        f"{g.customers:,}",
        f"{g.buyers:,}",
        _pct(g.rate.estimate),
        f"{_pct(g.rate.low)}-{_pct(g.rate.high)}",
        f"{g.units:,.0f}",
    )


def _num0(x: object) -> str:
    return f"{float(x):,.0f}" if isinstance(x, int | float) else "?"


def _expected0(x: object) -> str:
    return fmt_expected(float(x)) if isinstance(x, int | float) else "?"


def render_results(r: CampaignResults, console: Console) -> None:
    t = Table(
        title=f"Campaign {escape(r.campaign_id)}: {escape(str(r.target))}, sent "
        f"{r.sent:%Y-%m-%d}, {r.horizon_days}-day horizon",
        title_justify="left",
    )
    for col in ("group", "customers", "buyers", "take-up", "95% CI", "units"):
        t.add_column(col, justify="left" if col == "group" else "right")
    _group_row(t, r.treatment)
    _group_row(t, r.holdout)
    console.print(t)
    if not r.complete:
        console.print(
            "[yellow]The horizon has not ended for every contact: later orders may "
            "still add buyers.[/]",
            soft_wrap=False,
        )
    if r.difference is not None and r.ratio is not None:
        d, q = r.difference, r.ratio
        console.print(
            f"Difference {_pct(d.estimate)} points (95% CI {_pct(d.low)} to {_pct(d.high)}); "
            f"relative uplift x{q.estimate:.2f} (95% CI x{q.low:.2f} to "
            f"{'x' + format(q.high, '.2f') if math.isfinite(q.high) else 'unbounded'}).",
            soft_wrap=False,
        )
    if r.predicted is not None:
        p = r.predicted.expected
        n = r.predicted.audience
        who = (
            "in the treatment group"
            if n == r.treatment.customers
            else f"among the {n:,} of {r.treatment.customers:,} treated customers it covers"
        )
        observed = r.treatment.buyers if r.observed_about is None else r.observed_about
        held = (
            f"and {r.holdout.buyers:,} of {r.holdout.customers:,} held out (at the holdout's "
            f"rate: {r.holdout.rate.estimate * n:,.0f} of {n:,})"
            if r.holdout.customers
            else "and no one was held out to compare"  # no rate to scale (it was printed as nan)
        )
        console.print(
            f"Predicted buyers {who} without the offer: {fmt_expected(p.expected)} "
            f"({p.level:.0%} interval {fmt_expected(p.low)}-{fmt_expected(p.high)}); observed {observed:,} of "
            f"those {n:,}, {held}.",
            soft_wrap=False,
        )
    if r.promised is not None:
        b = r.promised
        console.print(
            f"At build: {_expected0(b.get('expected'))} ({_expected0(b.get('low'))}-"
            f"{_expected0(b.get('high'))}) baseline buyers expected of {_num0(b.get('audience'))} "
            f"customers, from {_num0(b.get('n_backtests'))} backtests "
            f"(learnt from {escape(str(b.get('for_target', '?')))}; campaign log).",
            soft_wrap=False,
        )
    if r.prediction_note:
        console.print(f"[dim]{escape(r.prediction_note)}[/]", soft_wrap=False)
    console.print(f"[bold]{escape(r.sentence())}[/]", soft_wrap=False)


# -- the gains chart ----------------------------------------------------------------------------
def gains_chart_text(points: pl.DataFrame, width: int = 50, height: int = 12) -> str:
    """Cumulative share of buyers (``*``) against share of the list contacted, with the random
    list (``.``) for comparison."""
    x = points["share_customers"].to_list()
    y = points["share_buyers"].to_list()
    grid = [[" "] * (width + 1) for _ in range(height + 1)]
    for col in range(width + 1):
        diagonal = round(col / width * height)
        grid[height - diagonal][col] = "."
    for col in range(width + 1):
        share = col / width
        # linear interpolation along the curve
        val = y[-1]
        for i in range(1, len(x)):
            if share <= x[i]:
                span = x[i] - x[i - 1]
                val = y[i - 1] + (y[i] - y[i - 1]) * ((share - x[i - 1]) / span if span else 1)
                break
        grid[height - round(val * height)][col] = "*"
    lines = ["share of buyers found (*) vs. a random list (.)"]
    for i, row in enumerate(grid):
        label = f"{100 * (height - i) / height:4.0f}% |" if i % 3 == 0 else "      |"
        lines.append(label + "".join(row))
    lines.append("      +" + "-" * (width + 1))
    lines.append("       0%" + " " * (width - 10) + "100% of the list")
    return "\n".join(lines)


def gains_svg(points: pl.DataFrame, title: str = "Gains chart") -> str:
    """A standalone SVG of the gains curve and the random-list diagonal."""
    w, h, m = 480, 360, 50
    pw, ph = w - 2 * m, h - 2 * m

    def xy(px: float, py: float) -> str:
        return f"{m + px * pw:.1f},{h - m - py * ph:.1f}"

    curve = " ".join(
        xy(a, b) for a, b in zip(points["share_customers"], points["share_buyers"], strict=True)
    )
    ticks: list[str] = []
    for k in range(0, 101, 25):
        f = k / 100
        ticks.append(
            f'<text x="{m + f * pw:.1f}" y="{h - m + 18}" text-anchor="middle">{k}%</text>'
        )
        ticks.append(
            f'<text x="{m - 8}" y="{h - m - f * ph + 4:.1f}" text-anchor="end">{k}%</text>'
        )
        ticks.append(
            f'<line x1="{m}" y1="{h - m - f * ph:.1f}" x2="{w - m}" '
            f'y2="{h - m - f * ph:.1f}" stroke="#ddd"/>'
        )
    head = (
        f'<svg xmlns="http://www.w3.org/2000/svg" width="{w}" height="{h}" '
        f'viewBox="0 0 {w} {h}" font-family="sans-serif" font-size="12">'
    )
    title_el = (
        f'<text x="{w / 2}" y="24" text-anchor="middle" font-size="14">{html_escape(title)}</text>'
    )
    axes = [
        f'<line x1="{m}" y1="{h - m}" x2="{w - m}" y2="{h - m}" stroke="black"/>',
        f'<line x1="{m}" y1="{m}" x2="{m}" y2="{h - m}" stroke="black"/>',
    ]
    random_line = (
        f'<polyline points="{xy(0, 0)} {xy(1, 1)}" fill="none" stroke="#888" '
        'stroke-dasharray="5,4"/>'
    )
    model_line = f'<polyline points="{curve}" fill="none" stroke="#1f6f43" stroke-width="2.5"/>'
    labels = [
        (
            f'<text x="{w / 2}" y="{h - 12}" text-anchor="middle">share of the list contacted '
            "(best scores first)</text>"
        ),
        (
            f'<text x="14" y="{h / 2}" text-anchor="middle" transform="rotate(-90 14 {h / 2})">'
            "share of buyers found</text>"
        ),
        (
            f'<text x="{w - m - 4}" y="{h - m - 0.1 * ph:.1f}" text-anchor="end" fill="#888">'
            "random list</text>"
        ),
    ]
    parts = [
        head,
        '<rect width="100%" height="100%" fill="white"/>',
        title_el,
        *ticks,
        *axes,
        random_line,
        model_line,
        *labels,
        "</svg>",
        "",
    ]
    return "\n".join(parts)


def write_chart(points: pl.DataFrame, path: str | Path, title: str = "Gains chart") -> Path:
    """Write the gains chart as SVG (PNG needs a plotting library reachlist does not depend on)."""
    p = Path(path)
    if p.suffix.lower() != ".svg":
        raise InputError(
            f"Expected a chart file ending in .svg, found {p.name!r}.",
            hint="pass --chart gains.svg (PNG would need a plotting library; convert the SVG "
            "with any image tool)",
        )
    p.write_text(gains_svg(points, title), encoding="utf-8")
    return p


def to_json(data: dict[str, Any]) -> str:
    def default(v: Any) -> Any:
        if isinstance(v, float) and not math.isfinite(v):
            return None
        return str(v)

    def clean(v: Any) -> Any:
        if isinstance(v, float) and not math.isfinite(v):
            return None
        if isinstance(v, dict):
            return {k: clean(x) for k, x in v.items()}
        if isinstance(v, (list, tuple)):
            return [clean(x) for x in v]
        return v

    return json.dumps(clean(data), indent=2, default=default)
