"""What offers did before: the uplift learnt from finished campaigns with holdouts.

The baseline estimate (``reachlist.estimate``) says how many of a list would buy without the
offer. What the offer adds can only be learnt from campaigns that held customers out: for each
finished campaign of the same purpose in the campaign log (its horizon ended by the as-of day, a
holdout kept), ``results`` counts buyers in treatment and holdout; the campaigns are pooled as
strata of a Mantel-Haenszel risk ratio (treatment over holdout, Greenland-Robins interval), so a
large campaign weighs more and campaigns with different take-up are not mixed.

Thin evidence is shrunk toward no effect: the log ratio is combined with a normal prior centred on
0 with standard deviation ``PRIOR_SD`` (the conjugate normal update), so the kept share of the
measured effect is ``w = PRIOR_SD^2 / (PRIOR_SD^2 + se^2)`` and the interval is the posterior's.
Two campaigns of 70 held-out customers each keep about 80% of their measured effect; one small
campaign keeps much less, and the screen says how thin the evidence is.

At most ``MOST_CAMPAIGNS`` campaigns are read (the newest), each with one query per send day.

>>> learnt = learn_uplift(wh, log, "introduce", as_of=datetime(2026, 10, 1))   # doctest: +SKIP
>>> learnt.ratio, learnt.low, learnt.high                                       # doctest: +SKIP
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from datetime import datetime
from typing import Any

import numpy as np

from reachlist.campaign_list import list_campaigns
from reachlist.campaigns import CampaignLog
from reachlist.errors import ReachlistError
from reachlist.results import campaign_results
from reachlist.stats import StratifiedRatio, mantel_haenszel_risk_ratio
from reachlist.warehouse import Warehouse

__all__ = [
    "MOST_CAMPAIGNS",
    "PRIOR_SD",
    "LearntUplift",
    "PastCampaign",
    "learn_uplift",
    "shrink_log_ratio",
]

MOST_CAMPAIGNS = 20
PRIOR_SD = 0.5  # prior standard deviation of the log uplift ratio around no effect


@dataclass(frozen=True)
class PastCampaign:
    campaign_id: str
    target: str
    sent: datetime
    treated: int
    treated_buyers: int
    held: int
    held_buyers: int

    @property
    def ratio(self) -> float | None:
        if not (self.treated and self.held and self.held_buyers):
            return None
        return (self.treated_buyers / self.treated) / (self.held_buyers / self.held)


@dataclass(frozen=True)
class LearntUplift:
    """Treatment over holdout take-up, pooled over finished campaigns and shrunk toward 1."""

    purpose: str
    campaigns: tuple[PastCampaign, ...]
    measured: StratifiedRatio | None  # pooled, before shrinking (None: nothing to measure)
    ratio: float  # shrunk toward 1
    low: float
    high: float
    level: float
    kept: float  # share of the measured log effect kept (0: none measured)
    note: str  # how thin the evidence is, or why there is none

    @property
    def held_out(self) -> int:
        return sum(c.held for c in self.campaigns)

    @property
    def learnt(self) -> bool:
        return self.measured is not None

    def with_offer(self, baseline: float, low: float, high: float) -> tuple[float, float, float]:
        """Expected buyers with the offer: the baseline (with its interval) times the ratio (with
        its interval); the ends multiply, a conservative (wide) combination."""
        return baseline * self.ratio, low * self.low, high * self.high

    def incremental(self, baseline: float) -> tuple[float, float, float]:
        """Buyers the offer adds at the expected baseline, with the ratio's interval."""
        return baseline * (self.ratio - 1), baseline * (self.low - 1), baseline * (self.high - 1)

    def as_dict(self) -> dict[str, Any]:
        m = self.measured
        return {
            "purpose": self.purpose,
            "campaigns": [c.campaign_id for c in self.campaigns],
            "held_out": self.held_out,
            "measured_ratio": None if m is None else m.estimate,
            "measured_interval": None if m is None else [m.low, m.high],
            "ratio": self.ratio,
            "interval": [self.low, self.high],
            "level": self.level,
            "kept": self.kept,
            "note": self.note,
        }


def shrink_log_ratio(
    log_ratio: float, se: float, level: float = 0.9
) -> tuple[float, float, float, float]:
    """Posterior mean ratio, interval ends and kept share for a measured log ratio with standard
    error ``se`` under a normal prior N(0, PRIOR_SD^2).

    >>> [round(x, 3) for x in shrink_log_ratio(math.log(2.0), 0.5)]
    [1.414, 0.791, 2.53, 0.5]
    """
    prior = PRIOR_SD**2
    kept = prior / (prior + se**2) if se > 0 else 1.0
    mean = kept * log_ratio
    sd = math.sqrt(kept) * se
    from reachlist.stats.tails import norm_ppf  # here: command help starts without scipy

    z = norm_ppf(0.5 + level / 2)
    return math.exp(mean), math.exp(mean - z * sd), math.exp(mean + z * sd), kept


def _unlearnt(
    purpose: str, campaigns: tuple[PastCampaign, ...], level: float, why: str
) -> LearntUplift:
    """No effect measured: ratio 1 with no interval, and why."""
    return LearntUplift(purpose, campaigns, None, 1.0, 1.0, 1.0, level, 0.0, why)


def learn_uplift(
    wh: Warehouse,
    log: CampaignLog,
    purpose: str,
    *,
    as_of: datetime,
    level: float = 0.9,
    most: int = MOST_CAMPAIGNS,
) -> LearntUplift:
    """The uplift of ``purpose`` campaigns finished by ``as_of`` (newest ``most`` of them)."""
    listing = list_campaigns(log, today=as_of.date(), limit=10_000)
    done = listing.campaigns.filter(
        (listing.campaigns["purpose"] == purpose)
        & listing.campaigns["results_ready"]
        & (listing.campaigns["holdout"].fill_null(0) > 0)
    ).head(most)
    found: list[PastCampaign] = []
    for row in done.iter_rows(named=True):
        try:
            r = campaign_results(
                wh, log, row["campaign_id"], horizon_days=int(row["horizon_days"]), predict=False
            )
        except ReachlistError:
            continue  # a campaign whose contacts or target no longer read: left out
        if not r.complete:
            continue
        found.append(
            PastCampaign(
                row["campaign_id"],
                str(row["target"]),
                r.sent,
                r.treatment.customers,
                r.treatment.buyers,
                r.holdout.customers,
                r.holdout.buyers,
            )
        )
    campaigns = tuple(found)
    if not campaigns:
        return _unlearnt(
            purpose, (), level, f"no finished {purpose} campaign with a holdout in the campaign log"
        )
    tables = np.array(
        [
            [
                [c.treated_buyers, c.treated - c.treated_buyers],
                [c.held_buyers, c.held - c.held_buyers],
            ]
            for c in campaigns
        ],
        dtype=float,
    )
    try:
        measured = mantel_haenszel_risk_ratio(tables)
    except ReachlistError:
        why = f"{len(campaigns)} finished {purpose} campaign(s) without buyers on one side"
        return _unlearnt(purpose, campaigns, level, why)
    ratio, low, high, kept = shrink_log_ratio(math.log(measured.estimate), measured.se_log, level)
    held = sum(c.held for c in campaigns)
    n = len(campaigns)
    note = (
        f"from {n} finished {purpose} campaign{'s' if n != 1 else ''} ({held:,} held out); "
        f"measured x{measured.estimate:.2f} ({measured.level:.0%} CI x{measured.low:.2f}-"
        f"x{measured.high:.2f}), {kept:.0%} of it kept against a prior of no effect"
    )
    if kept < 0.5:
        note += "; thin evidence: most of the effect is not yet believed"
    return LearntUplift(purpose, campaigns, measured, ratio, low, high, level, kept, note)
