"""What an offer costs and earns: incremental units and revenue, coupon cost, net margin.

With a discount (a share of the net price), every buyer in the treatment group redeems it:
the baseline buyers, who would have bought at full price anyway, and the incremental buyers the
offer adds (``reachlist.uplift``). Per unit, an incremental buyer earns the margin less the
discount and a baseline buyer costs the discount, so at the expected baseline ``B``, units per
buyer ``u``, net price ``p``, discount ``d``, margin ``m`` (shares of ``p``) and uplift ratio
``r``:

- incremental units ``B (r - 1) u``; incremental revenue ``B (r - 1) u p (1 - d)``;
- coupon cost ``B r u p d``, of which ``B u p d`` goes to buyers who would have bought anyway;
- net margin ``B u p ((r - 1)(m - d) - d)``.

Each is given at the ratio's interval ends (the baseline's own interval is the list's; these
are at its expected value). Without a learnt uplift ``r`` = 1: the offer only gives the discount
away, and the screen says so. The price is the net amount per unit of the target's purchase
lines in the year before the end of the mining window (the history the rules read, which ends
at the last order by default; "today" may lie long after an old history), unless one is given.
"""

from __future__ import annotations

from dataclasses import asdict, dataclass
from datetime import datetime, timedelta
from typing import Any

from reachlist.errors import InputError
from reachlist.query import Query
from reachlist.targets import LEVEL_COLUMN, Target, day_of
from reachlist.warehouse import Warehouse
from reachlist.wording import option

__all__ = ["OfferEconomics", "check_offer_terms", "item_price", "offer_economics"]

PRICE_DAYS = 365

Triple = tuple[float, float, float]


@dataclass(frozen=True)
class OfferEconomics:
    discount: float  # share of the net price
    margin: float | None  # gross margin, share of the net price (None: not given)
    price: float
    price_from: str
    units_per_buyer: float
    baseline_buyers: float
    ratio: Triple  # uplift ratio with its interval; (1, 1, 1) when none is learnt
    learnt: bool

    def _at(self, f: Any) -> Triple:
        e, lo, hi = (f(r) for r in self.ratio)
        return e, min(lo, hi), max(lo, hi)

    @property
    def _unit(self) -> float:
        return self.baseline_buyers * self.units_per_buyer * self.price

    @property
    def incremental_units(self) -> Triple:
        return self._at(lambda r: self.baseline_buyers * (r - 1) * self.units_per_buyer)

    @property
    def incremental_revenue(self) -> Triple:
        return self._at(lambda r: self._unit * (r - 1) * (1 - self.discount))

    @property
    def coupon_cost(self) -> Triple:
        return self._at(lambda r: self._unit * r * self.discount)

    @property
    def anyway_cost(self) -> float:
        """The discount given to buyers who would have bought at full price anyway."""
        return self._unit * self.discount

    @property
    def net_margin(self) -> Triple | None:
        m = self.margin
        if m is None:
            return None
        return self._at(lambda r: self._unit * ((r - 1) * (m - self.discount) - self.discount))

    def as_dict(self) -> dict[str, Any]:
        out = asdict(self)
        out.update(
            incremental_units=list(self.incremental_units),
            incremental_revenue=list(self.incremental_revenue),
            coupon_cost=list(self.coupon_cost),
            coupon_cost_to_buyers_anyway=self.anyway_cost,
            net_margin=None if self.net_margin is None else list(self.net_margin),
        )
        return out


def check_offer_terms(discount: float | None, margin: float | None, price: float | None) -> None:
    """Discount and margin are percentages of the net price; a price is positive."""
    for value, name, low, high in ((discount, "discount", 0, 100), (margin, "margin", 0, 100)):
        if value is not None and not low < value < high:
            raise InputError(
                f"Expected {option(name)} as a percentage above {low} and below {high}, found "
                f"{value!r}.",
                hint=f"pass {option(name)} 15 for 15% of the net price",
            )
    if price is not None and not price > 0:
        raise InputError(
            f"Expected {option('price')} above 0, found {price!r}.",
            hint=f"pass the item's net price per unit, for example {option('price')} 12.50",
        )
    if discount is None and (margin is not None or price is not None):
        raise InputError(
            f"Expected {option('discount')} with {option('margin')} or {option('price')}, found "
            "none.",
            hint=f"pass {option('discount')} PCT: the economics are those of a discount",
        )


def item_price(wh: Warehouse, item: Target, until: datetime) -> tuple[float | None, int]:
    """Net price per unit of ``item``'s purchase lines in the year before ``until``'s day."""
    until = datetime(until.year, until.month, until.day)
    q = Query.from_template(
        "item_price",
        {
            "item": item.name,
            "since": day_of(until - timedelta(days=PRICE_DAYS)),
            "until": day_of(until),
        },
        level=LEVEL_COLUMN[item.level],
    )
    row = wh.fetch(q).row(0, named=True)
    units = int(row["units"] or 0)
    price = row["price"]
    return (float(price) if price is not None and units else None), units


def offer_economics(
    wh: Warehouse,
    target: Target,
    as_of: datetime,
    *,
    discount_pct: float,
    margin_pct: float | None,
    price: float | None,
    baseline_buyers: float,
    units_per_buyer: float,
    ratio: Triple | None,
) -> OfferEconomics:
    if price is not None:
        found, price_from = price, f"{option('price')}"
    else:
        got, units = item_price(wh, target, as_of)
        if got is None:
            raise InputError(
                f"Expected sales of {target} in the year before {as_of:%Y-%m-%d} to price the "
                "offer, found none.",
                hint=f"pass {option('price')} with its net price per unit",
            )
        found, price_from = got, f"{units:,} units sold in the year before {as_of:%Y-%m-%d}"
    return OfferEconomics(
        discount=discount_pct / 100,
        margin=None if margin_pct is None else margin_pct / 100,
        price=found,
        price_from=price_from,
        units_per_buyer=units_per_buyer,
        baseline_buyers=baseline_buyers,
        ratio=ratio if ratio is not None else (1.0, 1.0, 1.0),
        learnt=ratio is not None,
    )
