"""Rendering of `reachlist sizes`, `build`, `sql` and `overlap`."""

from __future__ import annotations

from rich.console import Console
from rich.markup import escape
from rich.table import Table

from reachlist.lists import Built, ListOutcome, skipped_note
from reachlist.overlap import ADVICE, OverlapReport
from reachlist.planning import Plan
from reachlist.query import Dialect, Rendered, literal
from reachlist.query import inline as inline_values
from reachlist.render import CAUTION, fmt_count, fmt_expected
from reachlist.render.takeup import estimate_lines, few_cutoffs_line, render_holdout_planning
from reachlist.wording import option

SENSITIVE_WARNING = (
    "Warning: this list uses items of a sensitive category ({items}). Inferring health or "
    "similar traits from purchases can be unlawful or harmful; make sure your organisation has "
    "approved this use before anyone is contacted."
)


def _pct(x: float) -> str:
    return f"{100 * x:.1f}%"


def render_plan_header(plan: Plan, console: Console) -> None:
    req = plan.request
    rs = plan.ruleset
    console.print(
        f"[bold]{escape(str(plan.target))}[/] · purpose {req.purpose} · campaign "
        f"{escape(plan.campaign_id)}",
        soft_wrap=False,
    )
    console.print(
        f"Antecedents held in {rs.window} ({rs.level} items, rules from {rs.n_baskets:,} "
        f"{rs.basket} baskets); top {len(plan.rules)} rules by {req.rank_by}"
        + (" (picked by id)" if req.rule_ids else ""),
        soft_wrap=False,
    )
    for note in plan.notes:
        console.print(f"[yellow]Note:[/] {escape(note)}", soft_wrap=False)


def render_warnings(plan: Plan, console: Console, *, logged: bool = False) -> None:
    """Overrides and sensitive items: printed loudly by every list-producing command."""
    where = "written to the campaign log" if logged else "`build` writes it to the campaign log"
    for override in plan.overrides:
        console.print(f"[bold red]Override:[/] {escape(override)}; {where}.", soft_wrap=False)
    if plan.sensitive:
        text = SENSITIVE_WARNING.format(items=", ".join(plan.sensitive))
        console.print(f"[bold red]{escape(text)}[/]", soft_wrap=False)


def render_caution(console: Console) -> None:
    console.print(f"[dim]{escape(CAUTION)}[/]", soft_wrap=False)


def rules_table(outcome: ListOutcome, width: int | None = None) -> Table:
    narrow = width is not None and width < 100  # rule ids and "above" move to --json
    t = Table(title="Rules, best first", title_justify="left", show_edge=False, pad_edge=False)
    t.add_column("#", justify="right")
    if not narrow:
        t.add_column("rule", style="dim", overflow="fold", min_width=7)
    t.add_column("antecedent", overflow="fold", min_width=12)
    t.add_column("co-purchase %", justify="right", no_wrap=True)
    t.add_column("lift", justify="right", no_wrap=True)
    t.add_column("b.lift", justify="right", no_wrap=True)
    t.add_column("reach", justify="right", no_wrap=True)
    t.add_column("kept", justify="right", no_wrap=True)
    if not narrow:
        t.add_column("above", justify="right", no_wrap=True)
    t.add_column("adds", justify="right", no_wrap=True)
    for rr in outcome.per_rule or []:
        r = rr.rule
        low, high = rr.interval
        cells = [
            str(r.rank) + ("" if r.significant or not narrow else " [yellow]ns[/]"),
            *(
                [escape(r.rule_id) + ("" if r.significant else " [yellow]ns[/]")]
                if not narrow
                else []
            ),
            escape(" + ".join(r.antecedent)),
            f"{100 * r.score:.1f} ({100 * low:.1f}-{100 * high:.1f})",
            f"{r.lift:.2f}",
            "-" if r.breadth_lift is None else f"{r.breadth_lift:.2f}",
            fmt_count(rr.reached),
            fmt_count(rr.kept),
            *([fmt_count(rr.above)] if not narrow else []),
            fmt_count(rr.adds),
        ]
        t.add_row(*cells)
    return t


def waterfall_table(outcome: ListOutcome) -> Table:
    t = Table(title="Exclusions, in order", title_justify="left", show_edge=False, pad_edge=False)
    t.add_column("step")
    t.add_column("removed", justify="right")
    t.add_column("left", justify="right")
    t.add_column("", style="dim")
    t.add_row("reached by the rules", "", fmt_count(outcome.reached), "")
    for s in outcome.waterfall:
        if s.in_use:
            t.add_row(s.label, fmt_count(s.removed), fmt_count(s.remaining), escape(s.note))
        else:
            note = s.note
            if s.key in ("no_consent", "suppressed"):
                note += f"; would have removed up to {s.flagged:,}"
                t.add_row(f"[bold red]{s.label}[/]", "off", fmt_count(s.remaining), escape(note))
            else:
                t.add_row(f"[dim]{s.label}[/]", "-", fmt_count(s.remaining), escape(note))
    return t


def render_outcome_totals(outcome: ListOutcome, console: Console) -> None:
    share = outcome.plan.request.holdout
    console.print(
        f"[bold]List:[/] {outcome.listed.height:,} customers: {outcome.treatment.height:,} to "
        f"contact, {outcome.holdout.height:,} held out ({share:.0%} by hash of campaign and "
        "customer id; logged, not contacted).",
        soft_wrap=False,
    )
    render_takeup(outcome, console)
    c = outcome.clearance
    units = None if c is None else c.expected_units
    if c is not None and units is None:
        console.print(
            f"[bold yellow]Clearance:[/] stock {c.stock:,} ({c.stock_from}) {escape(c.basis)}; "
            f"the list keeps all {c.available:,} customers. reachlist sizes stock only by a "
            "calibrated take-up rate, never by the co-purchase rate.",
            soft_wrap=False,
        )
    elif c is not None and units is not None:
        basis = (
            f"{c.basis} x {c.units_per_buyer:.2f} units per buyer ({escape(c.units_from)}, "
            f"{c.buyers_seen:,} {'buyer' if c.buyers_seen == 1 else 'buyers'})"
        )
        if c.unestimated:
            basis += (
                f"; {c.unestimated:,} listed customers who already hold "
                f"{escape(str(outcome.plan.rules_target))} count for no units"
            )
        if c.clears:
            console.print(
                f"[bold]Clearance:[/] stock {c.stock:,} ({c.stock_from}); the first "
                f"{c.customers:,} of {c.available:,} customers, likeliest buyers first "
                f"({outcome.treatment.height:,} to contact), are expected to take "
                f"{units:,.0f} units at {basis}.",
                soft_wrap=False,
            )
        else:
            console.print(
                f"[bold yellow]Clearance:[/] stock {c.stock:,} ({c.stock_from}); all "
                f"{c.available:,} customers ({outcome.treatment.height:,} to contact) are "
                f"expected to take only {units:,.0f} units "
                f"({units / c.stock:.0%} of the stock) at {basis}.",
                soft_wrap=False,
            )
            render_next_steps(outcome, console)


def render_next_steps(outcome: ListOutcome, console: Console) -> None:
    """The changes tried for a clearance that cannot clear the stock, most units first."""
    c = outcome.clearance
    if c is None or not outcome.next_steps:
        return
    console.print(
        "[bold]Next steps to clear more stock[/] (each tried alone on this list's exclusions and "
        "holdout; expected units of those contacted at a quick calibrated rate):",
        soft_wrap=False,
    )
    for s in outcome.next_steps:
        if s.expected_units is None:
            effect = f"not possible: {escape(s.note or 'no estimate')}"
        else:
            share = s.expected_units / c.stock
            effect = (
                f"{s.customers:,} customers ({s.to_contact:,} to contact), "
                f"{s.expected_units:,.0f} units ({share:.0%} of the stock)"
                + ("; clears it" if s.clears else "")
            )
        console.print(f"  {escape(s.change)}: {escape(s.what)}: {effect}.", soft_wrap=False)


def render_response(outcome: ListOutcome, console: Console) -> None:
    """Response with the offer and incremental buyers, from the uplift of past campaigns."""
    r, u = outcome.takeup, outcome.uplift
    if r is None or u is None:
        return
    e = r.expected
    if not u.learnt:
        console.print(
            f"[yellow]Response with the offer: not learnt[/] ({escape(u.note)}); the figures "
            "above are take-up without the offer. Keep a holdout and run `reachlist results` "
            "after the horizon: later lists learn the offer's effect from it.",
            soft_wrap=False,
        )
        return
    resp, low, high = u.with_offer(e.expected, e.low, e.high)
    inc, inc_low, inc_high = u.incremental(e.expected)
    console.print(
        f"[bold]Response with the offer:[/] {fmt_expected(resp)} ({fmt_expected(low)}-{fmt_expected(high)}) buyers of "
        f"{r.audience:,}: the baseline x{u.ratio:.2f} ({u.low:.2f}-{u.high:.2f}, "
        f"{u.level:.0%}), the uplift {escape(u.note)}.",
        soft_wrap=False,
    )
    console.print(
        f"[bold]Incremental buyers[/] (the offer's own): {fmt_expected(inc)} ({fmt_expected(inc_low)} to "
        f"{fmt_expected(inc_high)}) at the expected baseline.",
        soft_wrap=False,
    )


def render_economics(outcome: ListOutcome, console: Console) -> None:
    """The offer's money: incremental units and revenue, coupon cost, net margin."""
    x = outcome.economics
    if x is None:
        if outcome.plan.request.discount is not None:
            why = outcome.estimate_note or "no baseline estimate"
            console.print(
                f"[yellow]Offer economics: not computed[/] ({escape(why)}); they rest on the "
                f"baseline estimate, so run without {option('estimate=False')}.",
                soft_wrap=False,
            )
        return

    def num(v: float, money: bool) -> str:
        digits = 2 if money and abs(v) < 100 else 0
        text = f"{v:,.{digits}f}"
        return text[1:] if text.startswith("-") and float(text.replace(",", "")) == 0 else text

    def rng(t: tuple[float, float, float], money: bool = True) -> str:
        return f"{num(t[0], money)} ({num(t[1], money)} to {num(t[2], money)})"

    margin = "" if x.margin is None else f", margin {x.margin:.0%}"
    head = (
        f"[bold]Offer economics[/] at {x.discount:.0%} off (net price {x.price:,.2f} from "
        f"{escape(x.price_from)}{margin}; at the expected baseline, the uplift's interval): "
    )
    if not x.learnt:
        head += "no uplift is learnt yet, so the offer is counted as adding no buyers: "
    console.print(
        head + f"incremental units {rng(x.incremental_units, money=False)}, incremental revenue "
        f"{rng(x.incremental_revenue)}; coupon cost {rng(x.coupon_cost)}, of which "
        f"{num(x.anyway_cost, True)} goes to buyers who would have bought at full price anyway"
        + (
            f"; net margin {rng(x.net_margin)}."
            if x.net_margin is not None
            else f"; pass {option('margin')} PCT for the net margin."
        ),
        soft_wrap=False,
    )


def render_takeup(outcome: ListOutcome, console: Console) -> None:
    """Expected buyers of the contacted customers, with the interval and what it rests on;
    then the historical co-purchase rate, labelled as that."""
    r = outcome.takeup
    if r is not None:
        e = r.expected
        contacted = outcome.treatment.height
        who = f"of {r.audience:,} contacted customers"
        if r.audience != contacted:
            who = f"of the {r.audience:,} of {contacted:,} contacted customers who lack {r.target}"
        console.print(
            f"[bold]Baseline buyers within {r.horizon_days} days[/] (expected without the offer): "
            f"{fmt_expected(e.expected)} "
            f"({fmt_expected(e.low)}-{fmt_expected(e.high)}, {e.level:.0%} interval) {escape(who)} "
            f"({100 * r.rate:.2f}%), {escape(e.method)}.",
            soft_wrap=False,
        )
        if e.rests_on_few:
            console.print(few_cutoffs_line(e), soft_wrap=False)
        if r.audience != contacted:
            console.print(
                f"[yellow]Not estimated:[/] the other {contacted - r.audience:,} contacted "
                f"customers already hold {escape(str(r.target))} (a "
                f"{'stand-in' if outcome.plan.stand_in is not None else 'repurchase window'} "
                "lets them in); the history measures new buyers, not how holders take up the "
                "offer, so their buyers and units are not in the figures above.",
                soft_wrap=False,
            )
        for line in estimate_lines(r)[1:]:
            console.print(line, soft_wrap=False)
        if outcome.plan.stand_in is not None:
            console.print(
                f"[yellow]Note:[/] expected buyers are those of the stand-in "
                f"{escape(str(outcome.plan.stand_in))}, learnt from its past buyers.",
                soft_wrap=False,
            )
        render_response(outcome, console)
        render_economics(outcome, console)
    else:
        why = outcome.estimate_note or "no estimate"
        tail = (
            "; run without --no-estimate for baseline buyers with an interval from past backtests"
            if why == skipped_note()
            else ""
        )
        console.print(
            f"[yellow]Baseline buyers: not estimated[/] ({escape(why)}){tail}.", soft_wrap=False
        )
        render_economics(outcome, console)
    if outcome.holdout_plan is not None:
        render_holdout_planning(outcome.holdout_plan, console)
    rate = outcome.co_purchase_rate()
    if rate is not None:
        est, low, high = rate
        console.print(
            f"[dim]Historical co-purchase rate of the contacted customers' rules: {_pct(est)} "
            f"(rules' 95% intervals {_pct(low)}-{_pct(high)}). This is how often holders of the "
            "antecedent also held the target in the mining window, not a take-up forecast.[/]",
            soft_wrap=False,
        )


def render_sizes(outcome: ListOutcome, console: Console) -> None:
    render_plan_header(outcome.plan, console)
    render_warnings(outcome.plan, console)
    console.print(rules_table(outcome, width=console.width))
    console.print(
        "[dim]co-purchase %: share of antecedent holders who also held the target (95% "
        "interval), not take-up; b.lift: added value over shopping breadth; reach: customers "
        "holding the antecedent; kept: left after the exclusions; above: "
        "kept customers a rule above also reaches; adds: what the rule adds to the list.[/]",
        soft_wrap=False,
    )
    console.print(waterfall_table(outcome))
    render_outcome_totals(outcome, console)
    render_caution(console)


def render_built(built: Built, console: Console) -> None:
    o = built.outcome
    render_plan_header(o.plan, console)
    render_warnings(o.plan, console, logged=True)
    console.print(waterfall_table(o))
    render_outcome_totals(o, console)
    for note in built.notes:
        console.print(f"Note: {escape(note)}", soft_wrap=False)
    console.print(
        f"[green]Wrote {built.rows:,} customers to {escape(str(built.path))}[/]; campaign "
        f"{escape(o.plan.campaign_id)} with {o.holdout.height:,} held-out customers logged in "
        f"{escape(built.log_where)}.",
        soft_wrap=False,
    )
    if built.also_written:
        holdout, *sidecar = built.also_written
        told = f"Held-out customers (for the platform's suppression): {escape(str(holdout))}"
        if sidecar:
            told += f"; provenance: {escape(str(sidecar[0]))}"
        console.print(told + ".", soft_wrap=False)
    render_caution(console)


def sql_text(rendered: Rendered, dialect: Dialect, *, inline: bool = False) -> str:
    """The SQL as it runs, followed by its bound values as comments (or with values inlined)."""
    if inline:
        return inline_values(rendered, dialect).rstrip() + "\n"
    mark = "$" if dialect.placeholder == "dollar" else ":"
    lines = [rendered.sql.rstrip(), "", "-- bound values (never spliced into the text above):"]
    for name, value in rendered.params.items():
        shown = literal(value).replace("\r", "\\r").replace("\n", "\\n")
        lines.append(f"--   {mark}{name} = {shown}")
    return "\n".join(lines) + "\n"


def render_overlap(report: OverlapReport, console: Console, *, show_all: bool = False) -> None:
    console.print(
        f"[bold]Promotion overlap[/] of {len(report.items)} {report.level} items: "
        f"{report.n_baskets:,} {report.basket} baskets in {report.window}",
        soft_wrap=False,
    )
    t = Table(show_edge=False, pad_edge=False)
    t.add_column("items", overflow="fold")
    t.add_column("together", justify="right")
    t.add_column("by chance", justify="right")
    t.add_column("lift", justify="right")
    t.add_column("p adj", justify="right")
    t.add_column("")
    shown = report.sets if show_all else report.overlapping
    for s in shown:
        p = s.p_adjusted
        t.add_row(
            escape(" + ".join(s.items)),
            fmt_count(s.n_together),
            f"{s.expected:,.1f}",
            f"{s.lift:.2f}",
            "<1e-99" if p < 1e-99 else (f"{p:.1e}" if p < 0.001 else f"{p:.3f}"),
            "[bold]together[/]" if s.significant else "[dim]ns[/]",
        )
    if shown:
        console.print(t)
    hidden = len(report.sets) - len(shown)
    console.print(
        f"{len(report.overlapping)} of {len(report.sets)} pairs and triples sell together more "
        f"often than chance (one-sided Fisher exact test on each split of a set, "
        f"{report.correction}-corrected over all {len(report.sets)} sets, adjusted p < "
        f"{report.alpha}, lift > 1)"
        + (f"; {hidden} others hidden (--all shows them)." if hidden else "."),
        soft_wrap=False,
    )
    if report.overlapping:
        console.print(f"[yellow]Advice:[/] {escape(ADVICE)}", soft_wrap=False)
    else:
        console.print(
            "No set stands out: discounting these items together costs no margin on "
            "purchases that were already happening together.",
            soft_wrap=False,
        )


OUTCOME_SCHEMA = 1


def _uplift_json(outcome: ListOutcome) -> dict[str, object]:
    u = outcome.uplift
    assert u is not None
    out: dict[str, object] = u.as_dict()
    r = outcome.takeup
    if r is not None and u.learnt:
        e = r.expected
        resp = u.with_offer(e.expected, e.low, e.high)
        inc = u.incremental(e.expected)
        out["response_buyers"] = resp[0]
        out["response_interval"] = [resp[1], resp[2]]
        out["incremental_buyers"] = inc[0]
        out["incremental_interval"] = [inc[1], inc[2]]
    return out


def outcome_json(outcome: ListOutcome, built: Built | None = None) -> str:
    """`sizes --json` / `build --json`: the preview as numbers (and, after a build, its files)."""
    import dataclasses
    import json

    plan = outcome.plan
    rules = []
    reach = {r.rule.rule_id: r for r in outcome.per_rule or []}
    for r in plan.rules:
        row: dict[str, object] = {
            "rank": r.rank,
            "rule_id": r.rule_id,
            "antecedent": list(r.antecedent),
            "co_purchase_rate": r.confidence,
            "lift": r.lift,
            "breadth_lift": r.breadth_lift,
            "significant": r.significant,
        }
        if r.rule_id in reach:
            rr = reach[r.rule_id]
            row.update(
                reached=rr.reached,
                kept=rr.kept,
                above=rr.above,
                adds=rr.adds,
                co_purchase_interval=list(rr.interval),
            )
        rules.append(row)
    payload: dict[str, object] = {
        "schema_version": OUTCOME_SCHEMA,
        "campaign_id": plan.campaign_id,
        "target": str(plan.target),
        "stand_in": None if plan.stand_in is None else str(plan.stand_in),
        "purpose": plan.request.purpose,
        "as_of": plan.now.isoformat(),
        "send_date": None if plan.send_at is None else plan.send_at.date().isoformat(),
        "window": {
            "since": plan.spec.lookback.since.isoformat(),
            "until": plan.spec.lookback.until.isoformat(),
        },
        "level": plan.ruleset.level,
        "rules": rules,
        "reached": outcome.reached,
        "waterfall": [
            {
                "step": s.key,
                "label": s.label,
                "in_use": s.in_use,
                "removed": s.removed,
                "left": s.remaining,
                "note": s.note or None,
            }
            for s in outcome.waterfall
        ],
        "listed": outcome.listed.height,
        "treatment": outcome.treatment.height,
        "holdout": outcome.holdout.height,
        "baseline_buyers": None if outcome.takeup is None else outcome.takeup.as_dict(),
        "uplift": None if outcome.uplift is None else _uplift_json(outcome),
        "economics": None if outcome.economics is None else outcome.economics.as_dict(),
        "estimate_note": outcome.estimate_note,
        "holdout_power": None if outcome.holdout_plan is None else outcome.holdout_plan.as_dict(),
        "clearance": None if outcome.clearance is None else dataclasses.asdict(outcome.clearance),
        "next_steps": [dataclasses.asdict(s) for s in outcome.next_steps],
        "notes": list(plan.notes),
        "overrides": list(plan.overrides),
    }
    if built is not None:
        payload["files"] = {"list": str(built.path), "also": [str(p) for p in built.also_written]}
        payload["log"] = built.log_where
        payload["notes"] = [*plan.notes, *built.notes]
    return json.dumps(payload, indent=2, default=str)
