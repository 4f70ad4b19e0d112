"""Preview and build a campaign list from a plan (``reachlist.planning``).

rules toward the target -> audience (``reachlist.audience``) -> exclusions in their fixed order
(``reachlist.exclusions``) -> holdout (``reachlist.holdout``) -> for a clearance, a cut sized to
the stock (``reachlist.clearance``) -> file (``reachlist.export``) and campaign log (``reachlist.campaigns``).

>>> plan = plan_list(wh, ListRequest("SG04-104"))            # doctest: +SKIP
>>> preview = preview_list(wh, plan)                          # doctest: +SKIP
>>> built = build_list(wh, plan, "mats.csv", log=CampaignLog.open(wh))   # doctest: +SKIP
"""

from __future__ import annotations

import dataclasses
import math
from collections.abc import Callable
from dataclasses import asdict, dataclass
from datetime import timedelta
from pathlib import Path
from typing import Any

import polars as pl

from reachlist import ids
from reachlist.audience import (
    ChosenRule,
    reach_query,
    rule_rate_interval,
)
from reachlist.campaigns import CampaignLog, CampaignRecord
from reachlist.clearance import NOT_NEEDED, QUICK_CUTOFFS, Clearance, NextStep, size_to_stock
from reachlist.delivery import (
    PROVENANCE_KEY,
    delivery_frames,
    holdout_path,
    provenance_json,
    sidecar_path,
)
from reachlist.economics import OfferEconomics, offer_economics
from reachlist.errors import EmptyResultError, ReachlistError
from reachlist.estimate import (
    Calibrated,
    HoldoutPlanning,
    TakeUpReport,
    calibrate_audience,
    holdout_planning,
)
from reachlist.exclusions import FROM_LOG_OR_LIST, STEPS, StepCount, apply_exclusions
from reachlist.export import (
    StagedFile,
    StagedSet,
    check_destination,
    clear_leftovers,
    list_format,
    stage_list,
    stage_text,
)
from reachlist.holdout import (
    assign_holdout,
    global_holdout,
)
from reachlist.planning import Plan
from reachlist.uplift import LearntUplift, learn_uplift
from reachlist.warehouse import Warehouse
from reachlist.wording import option

__all__ = [
    "BUILD_STAGES",
    "Built",
    "ListOutcome",
    "RuleReach",
    "build_list",
    "list_outcome",
    "preview_list",
]


def skipped_note() -> str:
    """Why a preview has no estimate when it was not asked for one."""
    return f"skipped with {option('estimate=False')}"


@dataclass(frozen=True)
class RuleReach:
    """A rule's share of the audience (preview)."""

    rule: ChosenRule
    reached: int  # customers holding the antecedent (before exclusions)
    kept: int  # of those, customers left after the exclusions
    above: int  # of the kept, customers a higher-ranked rule also reaches
    interval: tuple[float, float]  # 95% Wilson interval of the co-purchase rate

    @property
    def adds(self) -> int:
        return self.kept - self.above


@dataclass
class ListOutcome:
    """Every reached customer with its exclusion flags, ``excluded_by`` and ``contact_group``."""

    plan: Plan
    customers: pl.DataFrame
    waterfall: list[StepCount]
    clearance: Clearance | None = None
    per_rule: list[RuleReach] | None = None
    log_where: str | None = None
    takeup: TakeUpReport | None = None  # expected buyers of the treatment group
    holdout_plan: HoldoutPlanning | None = None
    estimate_note: str | None = None  # why there is no take-up estimate
    # clearance that cannot clear the stock: changes tried, with their effect (reachlist.stock_steps)
    next_steps: tuple[NextStep, ...] = ()
    # what offers of this purpose did in finished campaigns with holdouts (reachlist.uplift)
    uplift: LearntUplift | None = None
    economics: OfferEconomics | None = None  # with a discount (reachlist.economics)

    @property
    def reached(self) -> int:
        return self.customers.height

    @property
    def listed(self) -> pl.DataFrame:
        return self.customers.filter(pl.col("contact_group").is_not_null())

    @property
    def treatment(self) -> pl.DataFrame:
        return self.customers.filter(pl.col("contact_group") == "treatment")

    @property
    def holdout(self) -> pl.DataFrame:
        return self.customers.filter(pl.col("contact_group") == "holdout")

    def co_purchase_rate(self) -> tuple[float, float, float] | None:
        """Mean historical co-purchase rate of the treatment group's reasons, with the mean of the
        rules' interval ends. Not a take-up forecast: customers who hold an antecedent today are
        not the customers the rate was measured on."""
        t = self.treatment
        if t.height == 0:
            return None
        by_rule = {r.rule_id: r for r in self.plan.rules}
        counts = t.group_by("rule_id").len().iter_rows()
        n = lo = hi = est = 0.0
        for rule_id, k in counts:
            rule = by_rule[rule_id]
            low, high = rule_rate_interval(rule)
            est += k * rule.score
            lo += k * low
            hi += k * high
            n += k
        return est / n, lo / n, hi / n

    def counts(self) -> dict[str, Any]:
        out: dict[str, Any] = {
            "reached": self.reached,
            "waterfall": [asdict(s) for s in self.waterfall],
            "listed": self.listed.height,
            "treatment": self.treatment.height,
            "holdout": self.holdout.height,
        }
        if self.clearance is not None:
            out["clearance"] = asdict(self.clearance)
        if self.next_steps:
            out["next_steps"] = [asdict(s) for s in self.next_steps]
        out["estimate"] = self.estimate_counts()
        return out

    def estimate_counts(self) -> dict[str, Any]:
        """The take-up estimate as plain values for the campaign log (or why there is none)."""
        r = self.takeup
        if r is None:
            return {"skipped": self.estimate_note or "not computed"}

        def num(x: float) -> float | None:
            return float(x) if math.isfinite(x) else None

        e = r.expected
        return {
            "expected": num(e.expected),
            "low": num(e.low),
            "high": num(e.high),
            "level": e.level,
            "n_backtests": e.n_backtests,
            "method": e.method,
            "horizon_days": r.horizon_days,
            "audience": r.audience,
            "for_target": str(r.target),
            "as_of": r.as_of.isoformat(),
            "base_rate": num(r.base_rate),
            "breadth_matched_rate": num(r.breadth_matched_rate),
            "added_value": None if r.added_value is None else num(r.added_value.estimate),
            "uplift": None if self.uplift is None else self.uplift.as_dict(),
            "economics": None if self.economics is None else self.economics.as_dict(),
        }


@dataclass(frozen=True)
class Built:
    outcome: ListOutcome
    path: Path
    rows: int
    log_where: str
    notes: tuple[str, ...] = ()  # staging left-overs removed or found; a log without keys
    also_written: tuple[Path, ...] = ()  # the holdout file and (CSV) the provenance sidecar


BUILD_STAGES = (
    "list staged",  # the list is complete in a hidden file beside the destination
    "log written",  # the campaign and its contacts are written, not yet committed
    "list in place",  # the file is at its destination; the log has not committed
    "log committed",  # done: file and log agree
)
"""What ``build_list`` reports to ``progress`` (label, n done, of len(BUILD_STAGES)). A build
stopped at any point leaves either nothing, or the file without the log (stopped after the file
is in place and before the commit: rerun with --force to log it), or both; never a log without
its file."""


# -- planning ------------------------------------------------------------------------------------


# -- computing -----------------------------------------------------------------------------------
def _outcome(wh: Warehouse, plan: Plan, log: CampaignLog | None) -> ListOutcome:
    frame, waterfall = _excluded(wh, plan, log)
    return _finish(wh, plan, frame, waterfall, log)


def list_outcome(wh: Warehouse, plan: Plan, log: CampaignLog | None = None) -> ListOutcome:
    """The list as ``preview_list`` makes it (rules below ``min_audience`` dropped), without the
    per-rule reach."""
    plan, frame, waterfall, _ = _settle(wh, plan, log)
    return _finish(wh, plan, frame, waterfall, log)


def _excluded(
    wh: Warehouse, plan: Plan, log: CampaignLog | None
) -> tuple[pl.DataFrame, list[StepCount]]:
    """Every reached customer with the exclusions applied and the holdout assigned."""
    req = plan.request
    frame = wh.fetch(plan.query())
    if frame.height == 0:
        frame = _empty_audience(plan)
    frame = ids.normalise_frame(frame)
    if req.cap_days > 0 and log is not None:
        since = plan.now - timedelta(days=req.cap_days)
        recent = log.recent_contacts(since, other_than=plan.campaign_id)
        flag = pl.col("customer_id").is_in(ids.like(recent, frame.schema["customer_id"]).implode())
    else:
        flag = pl.lit(False)
    frame = frame.with_columns(flag.alias("contacted_recently"))
    notes: dict[str, str] = {}
    if log is not None:
        held, live = log.live_holdouts(plan.now, other_than=plan.campaign_id)
        frame = frame.with_columns(
            pl.col("customer_id")
            .is_in(ids.like(held, frame.schema["customer_id"]).implode())
            .alias("held_out_elsewhere")
        )
        if live:
            shown = ", ".join(live[:3]) + (f" and {len(live) - 3:,} more" if len(live) > 3 else "")
            notes["held_out_elsewhere"] = f"holdouts of {shown}"
        else:
            notes["held_out_elsewhere"] = "no live holdouts"
    else:
        frame = frame.with_columns(pl.lit(False).alias("held_out_elsewhere"))
        notes["held_out_elsewhere"] = "no campaign log to read"
    frame = frame.with_columns(
        global_holdout(frame["customer_id"], req.global_holdout, req.global_seed)
    )
    if req.global_holdout > 0:
        notes["global_holdout"] = f"{req.global_holdout:.0%} of all customers"
    else:
        notes["global_holdout"] = f"switched off ({option('global_holdout')} 0)"
    if plan.spec.contact:
        frame = frame.with_columns(
            (~pl.col("email").cast(pl.String).str.contains("@").fill_null(False)).alias(
                "no_address"
            )
        )
    else:
        frame = frame.with_columns(pl.lit(False).alias("no_address"))
        notes["no_address"] = f"no {option('contact=True')}"

    in_use = {"has_target", "returned_target"}
    if req.ignore_consent:
        notes["no_consent"] = f"switched off ({option('ignore_consent=True')})"
    else:
        in_use.add("no_consent")
    if req.ignore_suppressions:
        notes["suppressed"] = f"switched off ({option('ignore_suppressions=True')})"
    else:
        in_use.add("suppressed")
    if req.cap_days > 0:
        in_use.add("contacted_recently")
        if log is None:
            notes["contacted_recently"] = "no campaign log to read"
        elif log.also:
            notes["contacted_recently"] = "read " + " and ".join(log.read_from)
    else:
        notes["contacted_recently"] = f"not used ({option('cap_days')} 0)"
    if log is not None:
        in_use.add("held_out_elsewhere")
    if req.global_holdout > 0:
        in_use.add("global_holdout")
    if plan.spec.contact:
        in_use.add("no_address")
    if plan.spec.age_restricted:
        in_use.add("not_adult")
    else:
        notes["not_adult"] = "target is not age-restricted"
    f = plan.spec.filters
    for key, used in (
        ("outside_region", bool(f.regions)),
        ("outside_channel", bool(f.channels)),
        ("no_recent_order", f.ordered_within_days is not None),
    ):
        if used:
            in_use.add(key)
        else:
            notes[key] = "no filter given"
    frame, waterfall = apply_exclusions(frame, in_use=in_use, notes=notes)

    kept = pl.col("excluded_by").is_null()
    holdout = assign_holdout(plan.campaign_id, frame["customer_id"], req.holdout)
    frame = frame.with_columns(
        pl.when(kept)
        .then(pl.when(holdout).then(pl.lit("holdout")).otherwise(pl.lit("treatment")))
        .otherwise(pl.lit(None, dtype=pl.String))
        .alias("contact_group")
    )
    return frame, waterfall


def _finish(
    wh: Warehouse,
    plan: Plan,
    frame: pl.DataFrame,
    waterfall: list[StepCount],
    log: CampaignLog | None,
) -> ListOutcome:
    """Clearance cut and take-up estimate on top of the exclusions."""
    req = plan.request
    cal: Calibrated | None = None
    note: str | None = None
    if not req.estimate:
        note = skipped_note()
    else:
        cal, note = _calibrate(wh, plan, frame.filter(pl.col("excluded_by").is_null()))
    clearance = None
    if req.purpose == "clear":
        stock_cal, why_not = cal, note
        if not req.estimate:
            # Stock is never sized by the co-purchase rate: a quick calibration instead.
            quick = min(req.cutoffs, QUICK_CUTOFFS)
            kept = frame.filter(pl.col("excluded_by").is_null())
            stock_cal, why_not = _calibrate(wh, plan, kept, cutoffs=quick)
        frame, clearance = size_to_stock(wh, plan, frame, stock_cal, why_not)
        waterfall.append(
            StepCount(
                NOT_NEEDED,
                "not needed to clear the stock",
                True,
                clearance.available - clearance.customers,
                clearance.customers,
                0,
            )
        )
    outcome = ListOutcome(
        plan,
        frame,
        waterfall,
        clearance,
        log_where=log.where if log is not None else None,
        estimate_note=note,
    )
    treated = outcome.treatment["customer_id"]
    if cal is not None and treated.len():
        try:
            outcome.takeup = cal.for_customers(treated).report(given=treated.len())
        except ReachlistError as exc:
            outcome.estimate_note = f"unavailable: {exc.message}"
    elif cal is not None:
        outcome.estimate_note = "nobody left to contact"
    if outcome.takeup is not None and log is not None:
        outcome.uplift = learn_uplift(wh, log, req.purpose, as_of=plan.now)
    if outcome.takeup is not None and req.discount is not None:
        u = outcome.uplift
        outcome.economics = offer_economics(
            wh,
            plan.target,
            plan.spec.lookback.until,  # the year of history the rules read, not "today"
            discount_pct=req.discount,
            margin_pct=req.margin,
            price=req.price,
            baseline_buyers=outcome.takeup.expected.expected,
            units_per_buyer=outcome.takeup.units_per_buyer,
            ratio=(u.ratio, u.low, u.high) if u is not None and u.learnt else None,
        )
    if outcome.takeup is not None:
        listed = outcome.listed.height
        outcome.holdout_plan = holdout_planning(
            listed,
            outcome.holdout.height / listed if listed else req.holdout,
            outcome.takeup.rate,
        )
    return outcome


def _calibrate(
    wh: Warehouse, plan: Plan, kept: pl.DataFrame, cutoffs: int | None = None
) -> tuple[Calibrated | None, str | None]:
    """Backtests for the audience definition, with the kept customers as the audience.

    With a stand-in, take-up is learnt from buyers of the stand-in (the offered item has no
    history). A warehouse too short or too small to backtest gives a note, not an error: the
    preview is still useful without the estimate."""
    if kept.height == 0:
        return None, "nobody left after the exclusions"
    try:
        cal = calibrate_audience(
            wh,
            plan.rules_target,
            spec=plan.spec,
            customers=kept["customer_id"],
            horizon_days=plan.request.horizon_days,
            max_cutoffs=plan.request.cutoffs if cutoffs is None else cutoffs,
        )
    except ReachlistError as exc:
        return None, f"unavailable: {exc.message}"
    return cal, None


def _empty_audience(plan: Plan) -> pl.DataFrame:
    schema: dict[str, Any] = {"customer_id": pl.Int64, "rule_id": pl.String, "score": pl.Float64}
    schema.update({s.key: pl.Boolean for s in STEPS if s.key not in FROM_LOG_OR_LIST})
    if plan.spec.contact:
        schema["email"] = pl.String
    return pl.DataFrame(schema=schema)


def preview_list(wh: Warehouse, plan: Plan, log: CampaignLog | None = None) -> ListOutcome:
    """The analyst's preview: the outcome plus each rule's reach and overlap with rules above.

    Rules whose audience is below ``request.min_audience`` are dropped first."""
    plan, frame, waterfall, pairs = _settle(wh, plan, log)
    outcome = _finish(wh, plan, frame, waterfall, log)
    first_rank = pairs.group_by("customer_id").agg(pl.col("rule_rank").min().alias("first_rank"))
    who = outcome.customers.select(
        "customer_id",
        (pl.col("excluded_by").is_null() | (pl.col("excluded_by") == NOT_NEEDED)).alias("kept"),
    ).join(first_rank, on="customer_id", how="left")
    joined = pairs.join(who, on="customer_id", how="left")
    stats = {
        row["rule_rank"]: row
        for row in joined.group_by("rule_rank")
        .agg(
            pl.len().alias("reached"),
            pl.col("kept").sum().alias("kept"),
            (pl.col("kept") & (pl.col("first_rank") < pl.col("rule_rank"))).sum().alias("above"),
        )
        .iter_rows(named=True)
    }
    outcome.per_rule = [
        RuleReach(
            rule,
            int(stats.get(rule.rank, {}).get("reached", 0)),
            int(stats.get(rule.rank, {}).get("kept", 0)),
            int(stats.get(rule.rank, {}).get("above", 0)),
            rule_rate_interval(rule),
        )
        for rule in plan.rules
    ]
    return outcome


def _reach_pairs(wh: Warehouse, plan: Plan) -> pl.DataFrame:
    return ids.normalise_frame(wh.fetch(reach_query(plan.spec))).with_columns(
        pl.col("rule_rank").cast(pl.Int64)
    )


def _settle(
    wh: Warehouse, plan: Plan, log: CampaignLog | None
) -> tuple[Plan, pl.DataFrame, list[StepCount], pl.DataFrame]:
    frame, waterfall = _excluded(wh, plan, log)
    pairs = _reach_pairs(wh, plan)
    minimum = plan.request.min_audience
    if minimum <= 0:
        return plan, frame, waterfall, pairs
    kept_ids = frame.filter(pl.col("excluded_by").is_null()).select("customer_id")
    own = dict(pairs.join(kept_ids, on="customer_id").group_by("rule_rank").len().iter_rows())
    small = [r for r in plan.rules if own.get(r.rank, 0) < minimum]
    if not small:
        return plan, frame, waterfall, pairs
    sizes = ", ".join(f"{r.rule_id} ({own.get(r.rank, 0):,})" for r in small)
    if plan.request.rule_ids:  # picked by hand: keep them, but say so
        note = (
            f"Rule(s) {sizes} reach fewer than {option('min_audience')} {minimum:,} customers after "
            "the exclusions; kept because they were picked by id."
        )
        return dataclasses.replace(plan, notes=(*plan.notes, note)), frame, waterfall, pairs
    rules = tuple(r for r in plan.rules if r not in small)
    if not rules:
        raise EmptyResultError(
            f"Expected a rule whose audience after exclusions has at least {option('min_audience')} "
            f"{minimum:,} customers, found none: {sizes}.",
            hint=f"lower {option('min_audience')}, widen the window, or raise {option('top')}",
        )
    note = (
        f"Not proposed: rule(s) {sizes} reach fewer than {option('min_audience')} {minimum:,} "
        "customers after the exclusions."
    )
    plan = dataclasses.replace(
        plan,
        rules=rules,
        spec=dataclasses.replace(plan.spec, rules=rules),
        notes=(*plan.notes, note),
    )
    frame, waterfall = _excluded(wh, plan, log)
    return plan, frame, waterfall, _reach_pairs(wh, plan)


def delivered_paths(out: str | Path) -> list[Path]:
    """Every file a build to ``out`` writes: the list, its holdout file and (CSV) the sidecar."""
    paths = [Path(out), holdout_path(out)]
    if list_format(out) == "csv":
        paths.append(sidecar_path(out))
    return paths


def _stage_delivery(wh: Warehouse, outcome: ListOutcome, out: str | Path, force: bool) -> StagedSet:
    from reachlist import __version__

    plan = outcome.plan
    delivery = delivery_frames(
        wh,
        outcome,
        built_at=plan.built_at or plan.now,
        version=__version__,
        offer_code=plan.request.offer_code,
    )
    provenance = provenance_json(delivery.provenance)
    meta = {PROVENANCE_KEY: provenance}
    files: list[StagedFile] = []
    try:
        files.append(stage_list(delivery.contacts, out, force=force, metadata=meta))
        files.append(stage_list(delivery.holdout, holdout_path(out), force=force, metadata=meta))
        if list_format(out) == "csv":
            files.append(stage_text(provenance, sidecar_path(out), force=force))
    except BaseException:
        for f in files:
            f.discard()
        raise
    return StagedSet(files)


def build_list(
    wh: Warehouse,
    plan: Plan,
    out: str | Path,
    *,
    log: CampaignLog,
    force: bool = False,
    replace: bool = False,
    progress: Callable[[str, int, int], None] | None = None,
) -> Built:
    """Write the treatment group to ``out`` and log the campaign (both or neither).

    The list is staged in a hidden file, the log is written in one transaction, the file is
    moved into place, and only then does the log commit. If the move fails the log rolls back;
    if the commit fails the file is taken back (a file it replaced returns). So contacts are
    never logged for a list that does not exist. Staging files that interrupted builds left
    beside ``out`` are removed first (or reported when their process may still run).
    """
    for i, path in enumerate(delivered_paths(out)):
        check_destination(path, force=force, list_file=i < 2)
    log.refuse_without_transactions()
    log.refuse_existing(plan.campaign_id, replace=replace)
    if plan.request.min_audience > 0:
        plan, frame, waterfall, _ = _settle(wh, plan, log)
        outcome = _finish(wh, plan, frame, waterfall, log)
    else:
        outcome = _outcome(wh, plan, log)
    if outcome.treatment.height == 0:
        biggest = max(outcome.waterfall, key=lambda s: s.removed, default=None)
        why = f"; the largest step, {biggest.label}, removed {biggest.removed:,}" if biggest else ""
        raise EmptyResultError(
            f"Expected customers to contact for {plan.target}, found none after exclusions "
            f"and holdout (rules reached {outcome.reached:,}{why}); nothing was written.",
            hint="run `reachlist sizes` with the same options to see the waterfall",
        )
    notes = [n for path in delivered_paths(out) for n in clear_leftovers(path).notes()]
    unkeyed = log.unkeyed()
    if unkeyed:
        notes.append(
            f"The campaign log table(s) {', '.join(unkeyed)} in {log.where} have no unique key "
            "(created by an earlier reachlist): two builds of one campaign at the same time "
            "could both log it. The README says how to recreate them with keys."
        )
    total = len(BUILD_STAGES)

    def stage(n: int) -> None:
        if progress is not None:
            progress(BUILD_STAGES[n - 1], n, total)

    staged = _stage_delivery(wh, outcome, out, force)
    try:
        stage(1)
        ran = wh.render_lasting(plan.query())  # what ran, without a connection's own tables
        record = CampaignRecord(
            campaign_id=plan.campaign_id,
            created_at=plan.built_at or plan.now,
            sent_at=plan.send_at,
            target=str(plan.target),
            purpose=plan.request.purpose,
            parameters={
                **plan.request.parameters(),
                "resolved_target": str(plan.target),
                "rules_from": str(plan.rules_target),
                "window": [plan.spec.lookback.since, plan.spec.lookback.until],
                "as_of": plan.now,
                "level": plan.ruleset.level,
                "basket": plan.ruleset.basket,
                "output": str(Path(out).resolve()),
                "sensitive": list(plan.sensitive),
                "audience_sql": {"dialect": wh.dialect.name, "sql": ran.sql, "values": ran.params},
                "cap_read": log.read_from if plan.request.cap_days > 0 else [],
            },
            rules=[asdict(r) for r in plan.rules],
            counts=outcome.counts(),
            overrides=plan.overrides,
        )
        contacts = outcome.listed.select("customer_id", "contact_group", "score", "rule_id")
        with log.recording(record, contacts, replace=replace):
            stage(2)
            path = staged.publish()
            stage(3)
    except BaseException:
        staged.withdraw()
        raise
    staged.settle()
    stage(4)
    return Built(
        outcome,
        path,
        staged.rows,
        log.where,
        tuple(notes),
        tuple(f.final for f in staged.files[1:]),
    )
