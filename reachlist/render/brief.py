"""The campaign brief as one self-contained HTML page (no scripts, no outside files): key numbers,
the exclusion waterfall and per-rule charts (matplotlib, inline SVG), rules in words, expected
buyers with their interval, holdout power and the cautions. The numbers also sit in the page as
JSON (``<script type="application/json" id="brief-data">``), equal to ``brief --json``."""

from __future__ import annotations

import html
import io
import json
from typing import Any

from reachlist.render import fmt_expected

CSS = """
body { font-family: system-ui, sans-serif; max-width: 60rem; margin: 2rem auto; padding: 0 1rem;
       color: #1d1d1d; line-height: 1.45; }
h1 { font-size: 1.5rem; margin-bottom: .2rem; } h2 { font-size: 1.15rem; margin-top: 2rem; }
.sub { color: #555; margin-top: 0; }
dl.key { display: grid; grid-template-columns: repeat(auto-fit, minmax(11rem, 1fr)); gap: .8rem; }
dl.key div { background: #f3f5f7; border-radius: 6px; padding: .6rem .8rem; }
dl.key dt { font-size: .85rem; color: #555; } dl.key dd { margin: 0; font-size: 1.35rem; }
table { border-collapse: collapse; width: 100%; font-size: .92rem; }
th, td { text-align: left; padding: .3rem .5rem; border-bottom: 1px solid #ddd; }
td.n, th.n { text-align: right; font-variant-numeric: tabular-nums; }
.chart svg { width: 100%; height: auto; }
.caution { background: #fff7e0; border-left: 4px solid #e0a800; padding: .5rem .8rem; }
"""


def _n(value: Any) -> str:
    if value is None:
        return "-"
    if isinstance(value, float):
        return fmt_expected(value)
    return f"{value:,}"


def _pct(value: float | None) -> str:
    return "-" if value is None else f"{100 * value:.1f}%"


def _short(text: str, width: int) -> str:
    return text if len(text) <= width else text[: width - 1] + "\u2026"


def _svg(fig: Any) -> str:
    buf = io.StringIO()
    fig.savefig(buf, format="svg", bbox_inches="tight", metadata={"Date": None})
    text = buf.getvalue()
    return text[text.index("<svg") :]


def waterfall_chart(data: dict[str, Any]) -> str:
    """Customers left after each exclusion step (horizontal bars), as inline SVG."""
    import matplotlib

    matplotlib.rcParams["svg.hashsalt"] = "reachlist"  # the same page for the same campaign
    from matplotlib.figure import Figure

    steps = (
        [("reached by the rules", data["reached"])]
        + [(s["step"], s["left"]) for s in data["waterfall"] if s["in_use"]]
        + [("to contact (after the holdout)", data["treatment"])]
    )
    fig = Figure(figsize=(7.5, 0.42 * len(steps) + 0.8))
    ax = fig.add_subplot()
    labels = [s for s, _ in steps][::-1]
    values = [v for _, v in steps][::-1]
    bars = ax.barh(labels, values, color="#3b6ea5")
    ax.bar_label(bars, labels=[f"{v:,}" for v in values], padding=3, fontsize=8)
    ax.set_xlabel("customers left")
    ax.spines[["top", "right"]].set_visible(False)
    ax.set_xlim(0, max(values) * 1.15 if max(values) else 1)
    return _svg(fig)


def rules_chart(data: dict[str, Any]) -> str:
    """Customers to contact and held out under each rule (the rule that reached them)."""
    import matplotlib

    matplotlib.rcParams["svg.hashsalt"] = "reachlist"
    from matplotlib.figure import Figure

    rules = data["rules"]
    fig = Figure(figsize=(7.5, 0.45 * len(rules) + 0.9))
    ax = fig.add_subplot()
    labels = [_short(f"{r['rank']}. {r['in_words']}", 60) for r in rules][::-1]
    t = [r["treatment"] for r in rules][::-1]
    h = [r["holdout"] for r in rules][::-1]
    ax.barh(labels, t, color="#3b6ea5", label="to contact")
    ax.barh(labels, h, left=t, color="#b9c9db", label="held out")
    ax.legend(loc="lower right", fontsize=8, frameon=False)
    ax.set_xlabel("customers listed under the rule")
    ax.spines[["top", "right"]].set_visible(False)
    return _svg(fig)


def brief_html(data: dict[str, Any]) -> str:
    e = html.escape
    exp = data["expected_buyers"]
    if exp is not None:
        expected = (
            f'<span data-field="expected">{_n(exp["expected"])}</span> '
            f'(<span data-field="expected_low">{_n(exp["low"])}</span>-'
            f'<span data-field="expected_high">{_n(exp["high"])}</span>)'
        )
        level = exp["level"]
        shown = f"{level:.0%}" if isinstance(level, float) else str(level)
        expected_note = (
            f"{e(shown)} interval from {exp['n_backtests']} backtests; "
            f"buyers within {exp['horizon_days']} days without the offer"
        )
    else:
        expected = '<span data-field="expected">not estimated</span>'
        expected_note = e(str(data.get("estimate_skipped") or "no estimate in the log"))
    key = [
        ("Customers to contact", f'<span data-field="treatment">{_n(data["treatment"])}</span>'),
        ("Held out (not contacted)", f'<span data-field="holdout">{_n(data["holdout"])}</span>'),
        ("Reached by the rules", f'<span data-field="reached">{_n(data["reached"])}</span>'),
        ("Expected buyers (baseline)", expected),
    ]
    offer = data.get("with_the_offer")
    if offer is not None:
        low, high = offer["incremental_interval"]
        key.append(
            (
                "Incremental buyers (the offer's own)",
                f'<span data-field="incremental">{_n(offer["incremental_buyers"])}</span> '
                f'(<span data-field="incremental_low">{_n(low)}</span> to '
                f'<span data-field="incremental_high">{_n(high)}</span>)',
            )
        )
    key_html = "".join(f"<div><dt>{e(k)}</dt><dd>{v}</dd></div>" for k, v in key)
    rows = "".join(
        f"<tr><td>{e(s['step'])}</td><td class='n' data-step-removed>"
        f"{_n(s['removed']) if s['in_use'] else '-'}</td><td class='n'>{_n(s['left'])}</td></tr>"
        for s in data["waterfall"]
    )
    rule_rows = "".join(
        f"<tr><td>{r['rank']}</td><td>{e(r['in_words'])}</td>"
        f"<td class='n'>{_pct(r['co_purchase_rate'])}</td><td class='n'>{r['lift']:.2f}</td>"
        f"<td class='n' data-rule-treatment>{_n(r['treatment'])}</td>"
        f"<td class='n'>{_n(r['holdout'])}</td></tr>"
        for r in data["rules"]
    )
    power = data["holdout_power"]
    if power is None:
        power_html = "<p>The holdout's power could not be worked out (no baseline rate).</p>"
    elif power["detectable_relative_uplift"] is None:
        power_html = (
            "<p>With this holdout no uplift can be detected with "
            f"{power['power']:.0%} power: hold out more customers or widen the list.</p>"
        )
    else:
        power_html = (
            f"<p>With {_n(data['holdout'])} held out of {_n(data['listed'])} and a baseline "
            f"near {_pct(power['baseline_rate'])}, the smallest uplift the holdout can detect is "
            f"<b data-field='detectable_uplift'>+{100 * power['detectable_relative_uplift']:.0f}"
            f"%</b> (two-proportion test, alpha {power['alpha']}, power {power['power']:.0%}).</p>"
        )
    overrides = ""
    if data.get("overrides"):
        overrides = f"<p class='caution'><b>Override:</b> {e(str(data['overrides']))}</p>"
    cautions = "".join(f"<p class='caution'>{e(c)}</p>" for c in data["cautions"])
    payload = json.dumps(data, indent=1, sort_keys=True, default=str).replace("</", "<\\/")
    sent = data.get("send_date") or "the build day"
    window = (
        " to ".join(w[:10] for w in data["window"][:2]) + " (end excluded)"
        if data["window"]
        else "-"
    )
    return f"""<!DOCTYPE html>
<html lang="en"><head><meta charset="utf-8">
<meta name="viewport" content="width=device-width, initial-scale=1">
<title>Campaign brief: {e(data["campaign_id"])}</title>
<style>{CSS}</style></head>
<body>
<h1>Campaign brief: <span data-field="campaign_id">{e(data["campaign_id"])}</span></h1>
<p class="sub">Offer: <b>{e(data["offer_name"])}</b> ({e(data["target"])}), purpose
{e(data["purpose"])}; built {e(data["built_at"][:16].replace("T", " "))}, sent {e(str(sent))};
rules from {e(window)} at {e(data["level"])} level.</p>
{overrides}
<dl class="key">{key_html}</dl>
<p class="sub">Expected buyers: {expected_note}.</p>
<h2>Who is left after each exclusion</h2>
<div class="chart">{waterfall_chart(data)}</div>
<table><thead><tr><th>step</th><th class="n">removed</th><th class="n">left</th></tr></thead>
<tbody>{rows}</tbody></table>
<h2>The rules, in words</h2>
<p>Each customer is listed under one rule: the items they bought that, in past orders, went with
{e(data["offer_name"])}.</p>
<div class="chart">{rules_chart(data)}</div>
<table><thead><tr><th>#</th><th>customers who</th><th class="n">co-purchase</th>
<th class="n">lift</th><th class="n">to contact</th><th class="n">held out</th></tr></thead>
<tbody>{rule_rows}</tbody></table>
<h2>Holdout</h2>
{power_html}
<h2>Cautions</h2>
{cautions}
<script type="application/json" id="brief-data">{payload}</script>
</body></html>
"""
