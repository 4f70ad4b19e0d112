"""The sample's customers and order history, generated per chunk of customers (numpy)."""

from __future__ import annotations

import math
from collections.abc import Sequence
from dataclasses import dataclass
from datetime import date, timedelta
from typing import Any

import numpy as np

from reachlist.sample.catalogue import UNKNOWN_SKUS, Catalogue
from reachlist.sample.period import DAYS, MONTH, PERIOD_START, T_END
from reachlist.sample.planted import PLANTED_RULES

# --------------------------------------------------------------------------------------------
# Generation
# --------------------------------------------------------------------------------------------

REGIONS = (
    "North",
    "North East",
    "North West",
    "Midlands",
    "East",
    "South East",
    "South West",
    "Coast & Islands",
)
_REGION_P = np.array([0.11, 0.09, 0.12, 0.17, 0.12, 0.19, 0.14, 0.06])
SUPPRESSION_REASONS = ("unsubscribed", "hard_bounce", "complaint", "customer_request", "deceased")
_REASON_P = np.array([0.55, 0.2, 0.07, 0.15, 0.03])
DOMAINS = ("example.com", "example.net", "example.org")

# rates of the quirks (per line / per customer)
_RETURN_RATE = 0.03  # share of purchase lines returned later
_DUPLICATE_RATE = 0.0004  # share of lines duplicated exactly
_ZERO_QTY_RATE = 0.0002  # share of lines turned into zero-quantity lines
_UNKNOWN_SKU_RATE = 0.0008  # share of lines whose SKU is missing from products
_NO_EMAIL = 0.08
_CONSENT = 0.70
_WITHDRAWN = 0.05  # of non-consenting customers: consented once, then withdrew (date kept)
_AGE_UNKNOWN = 0.13
_MINOR = 0.004  # aged 16-17 at PERIOD_END
_SUPPRESSED = 0.025
_SUPPRESSED_TWICE = 0.001


def order_day_cdf() -> np.ndarray:
    d = np.arange(DAYS)
    doy = np.array([(PERIOD_START + timedelta(days=int(x))).timetuple().tm_yday for x in d])
    w = 1.0 + 0.55 * np.cos(2 * np.pi * (doy - 125) / 365.25)  # spring peak, autumn trough
    w = w * np.where((d + PERIOD_START.weekday()) % 7 >= 5, 1.25, 1.0)  # busier weekends
    c = np.cumsum(w)
    return np.asarray(c / c[-1])


@dataclass
class Chunk:
    n: int
    # customers
    breadth: np.ndarray
    nfav: np.ndarray
    online_share: np.ndarray
    n_general_orders: np.ndarray
    has_email: np.ndarray
    domain: np.ndarray
    consent: np.ndarray
    consent_day: np.ndarray  # day index relative to PERIOD_START, -1e9 = NULL
    birth_day: np.ndarray  # day index relative to PERIOD_START, NULL flagged by age_known
    age_known: np.ndarray
    region: np.ndarray
    supp_cust: np.ndarray
    supp_reason: np.ndarray
    supp_day: np.ndarray
    # orders (chunk-local customer index)
    o_cust: np.ndarray
    o_t: np.ndarray
    o_online: np.ndarray
    # lines (chunk-local order index)
    l_order: np.ndarray
    l_sku: np.ndarray
    l_qty: np.ndarray
    l_cents: np.ndarray
    # ground truth per rule: (customer index, hold time or nan, first target time or nan,
    # source 0/1/2, first target sku or -1, target purchases, full target returns)
    planted: Sequence[tuple[np.ndarray, ...]]
    quirks: dict[str, int]


def _rule_masks(cat: Catalogue) -> tuple[np.ndarray, np.ndarray]:
    """(antecedent mask, target mask) over SKUs, for every planted rule together."""
    ante = np.zeros(len(cat.sku), dtype=bool)
    target = np.zeros(len(cat.sku), dtype=bool)
    for r in PLANTED_RULES:
        for mask, level, vals in (
            (ante, r["antecedent_level"], r["antecedent"]),
            (target, r["target_level"], (r["target"],)),
        ):
            for v in vals:
                if level == "sku":
                    mask[cat.sku.index(v)] = True
                else:
                    mask[cat.cat_idx == cat.cat_names.index(v)] = True
    return ante, target


def _hold_time(
    r: dict[str, Any],
    cat: Catalogue,
    l_cust: np.ndarray,
    l_t: np.ndarray,
    l_sku: np.ndarray,
    n: int,
) -> np.ndarray:
    """First time each customer holds every element of the rule's antecedent (inf: never)."""
    hold = np.full(n, -np.inf)
    for a in r["antecedent"]:
        if r["antecedent_level"] == "sku":
            mask = l_sku == cat.sku.index(a)
        else:
            mask = cat.cat_idx[l_sku] == cat.cat_names.index(a)
        first = np.full(n, np.inf)
        np.minimum.at(first, l_cust[mask], l_t[mask])
        hold = np.maximum(hold, first)
    return hold


def _shop_time(t: np.ndarray, online: np.ndarray) -> np.ndarray:
    """Store visits happen in opening hours: keep the day, squeeze the time into 08:00-20:00."""
    day = np.floor(t / 86_400)
    sod = t - day * 86_400
    return np.floor(np.where(online, t, day * 86_400 + 8 * 3600 + sod * 0.5))


def _draw_lines(
    rng: np.random.Generator,
    cat: Catalogue,
    gen_cats: np.ndarray,
    gen_p: np.ndarray,
    fav: np.ndarray,
    nfav: np.ndarray,
    l_cust: np.ndarray,
    l_day: np.ndarray,
) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Draw (sku, quantity, cents) for lines of the given customers on the given days."""
    L = len(l_cust)
    pick = (rng.random(L) * nfav[l_cust]).astype(np.int64)
    l_cat = gen_cats[fav[l_cust, pick]]
    explore = rng.random(L) < 0.05
    l_cat[explore] = gen_cats[rng.choice(len(gen_cats), int(explore.sum()), p=gen_p)]
    u = cat.cat_lo[l_cat] + rng.random(L) * cat.cat_w[l_cat]
    sku = np.searchsorted(cat.cum, u, side="right")
    sku = np.clip(sku, cat.cat_first[l_cat], cat.cat_last[l_cat])
    late = cat.launch_day[sku] > l_day
    sku[late] = cat.cat_fallback[l_cat[late]]
    cons = cat.consumable[sku]
    qty = np.where(cons, 1 + rng.poisson(0.4, L), 1 + (rng.random(L) < 0.04)).astype(np.int64)
    disc = rng.choice(np.array([1.0, 0.9, 0.8]), L, p=[0.85, 0.10, 0.05])
    cents = np.round(cat.price_cents[sku] * qty * disc).astype(np.int64)
    return sku.astype(np.int64), qty, cents


def _dedupe(l_order: np.ndarray, l_sku: np.ndarray, nsku: int) -> np.ndarray:
    """Index of the first line of each (order, sku) pair, in original order."""
    key = l_order * (nsku + len(UNKNOWN_SKUS)) + l_sku
    _, first = np.unique(key, return_index=True)
    return np.sort(first)


def generate_chunk(seed: int, k: int, n: int, cat: Catalogue, day_cdf: np.ndarray) -> Chunk:
    rng = np.random.default_rng(np.random.SeedSequence([seed, k, 0x5A17]))
    nsku = len(cat.sku)
    gen_cats = np.flatnonzero(cat.cat_weight > 0)
    gen_p = cat.cat_weight[gen_cats] / cat.cat_weight[gen_cats].sum()
    ante_mask, target_mask = _rule_masks(cat)
    planted_mask = ante_mask | target_mask

    # ---- customers -------------------------------------------------------------------------
    breadth = rng.gamma(2.0, 0.5, n)
    online_share = rng.beta(2.0, 3.0, n)
    nfav = np.clip(1 + rng.poisson(4.0 * breadth), 1, len(gen_cats)).astype(np.int64)
    keys = np.log(gen_p)[None, :] + rng.gumbel(size=(n, len(gen_cats)))
    fav = np.argsort(-keys, axis=1).astype(np.int16)  # favoured categories first

    has_email = rng.random(n) >= _NO_EMAIL
    domain = rng.integers(0, len(DOMAINS), n)
    consent = rng.random(n) < _CONSENT
    first_consent = (date(2022, 3, 1) - PERIOD_START).days
    consent_day = rng.integers(first_consent, DAYS, n)
    withdrawn = (~consent) & (rng.random(n) < _WITHDRAWN)
    consent_day = np.where(consent | withdrawn, consent_day, -(10**9))
    age_known = rng.random(n) >= _AGE_UNKNOWN
    minor = age_known & (rng.random(n) < _MINOR)
    age_years = np.where(minor, rng.uniform(16.0, 17.99, n), 18.0 + 70.0 * rng.beta(2.2, 2.6, n))
    birth_day = (DAYS - 1) - np.floor(age_years * 365.25).astype(np.int64)
    region = rng.choice(len(REGIONS), n, p=_REGION_P)
    supp = np.flatnonzero(rng.random(n) < _SUPPRESSED)
    twice = supp[rng.random(len(supp)) < _SUPPRESSED_TWICE / _SUPPRESSED]
    supp_cust = np.concatenate([supp, twice])
    supp_reason = rng.choice(len(SUPPRESSION_REASONS), len(supp_cust), p=_REASON_P)
    first_supp = (date(2023, 6, 1) - PERIOD_START).days
    supp_day = rng.integers(first_supp, DAYS, len(supp_cust))

    # ---- general orders --------------------------------------------------------------------
    n_orders = rng.poisson(0.5 + 7.0 * breadth)
    o_cust = np.repeat(np.arange(n), n_orders)
    n_general = len(o_cust)
    o_day = np.searchsorted(day_cdf, rng.random(n_general), side="right").clip(0, DAYS - 1)
    o_online = rng.random(n_general) < online_share[o_cust]
    sod = np.where(
        o_online, rng.integers(0, 86_400, n_general), rng.integers(8 * 3600, 20 * 3600, n_general)
    )
    o_t = o_day.astype(np.int64) * 86_400 + sod
    n_lines = 1 + rng.poisson(1.6, n_general)
    l_order = np.repeat(np.arange(n_general), n_lines)
    l_cust = o_cust[l_order]
    l_sku, l_qty, l_cents = _draw_lines(
        rng, cat, gen_cats, gen_p, fav, nfav, l_cust, o_day[l_order]
    )
    keep = _dedupe(l_order, l_sku, nsku)
    l_order, l_sku, l_qty, l_cents = l_order[keep], l_sku[keep], l_qty[keep], l_cents[keep]
    l_t = o_t[l_order].astype(float)
    l_cust = o_cust[l_order]

    # ---- planted processes -----------------------------------------------------------------
    # Per rule: the time the customer first holds the whole antecedent (general lines only;
    # antecedent SKUs are never fully returned), then a chain of target purchases: a purchase,
    # perhaps a full return (from then on the customer lacks the target again), the next purchase
    # from the same piecewise-constant hazard, and so on. Hazards are memoryless, so at any cutoff
    # a customer who holds the antecedent and lacks the target buys it within 30 days with
    # probability hazard_30d, whether "lacks" means "never bought" or "returned what was bought".
    p_cust, p_t, p_sku, p_qty, p_online = [], [], [], [], []
    r_cust_t, r_t_t, r_sku_t, r_qty_t, r_online_t, r_full_t = [], [], [], [], [], []
    planted = []
    for r in PLANTED_RULES:
        hold = _hold_time(r, cat, l_cust, l_t, l_sku, n)
        lam1 = -math.log(1.0 - r["hazard_30d"]) / MONTH
        lam0 = -math.log(1.0 - r["base_hazard_30d"]) / MONTH * breadth
        if r["target_level"] == "sku":
            t_idx = np.array([cat.sku.index(r["target"])])
            t_p = np.ones(1)
        else:
            ci = cat.cat_names.index(r["target"])
            t_idx = np.arange(cat.cat_first[ci], cat.cat_last[ci] + 1)
            w = cat.weight[t_idx] * (cat.launch_day[t_idx] <= 0)
            t_p = w / w.sum()
        first_t = np.full(n, np.nan)
        first_src = np.zeros(n, dtype=np.int8)  # 0 none, 1 base, 2 rule
        first_sku = np.full(n, -1, dtype=np.int64)
        n_pur = np.zeros(n, dtype=np.int32)
        n_ret = np.zeros(n, dtype=np.int32)
        active = np.arange(n)
        start = np.zeros(n)
        first_round = True
        while active.size:
            h = hold[active]
            tb = start + rng.exponential(size=active.size) / lam0[active]
            by_base = tb < h
            after = np.maximum(h, start)
            t = np.where(by_base, tb, after + rng.exponential(size=active.size) / lam1)
            ok = t < T_END
            a, t, by_base, after, start = active[ok], t[ok], by_base[ok], after[ok], start[ok]
            online = rng.random(a.size) < online_share[a]
            # never before the return it follows, nor before the antecedent that caused it
            t = np.maximum(_shop_time(t, online), np.where(by_base, start, after) + 60)
            ok = t < T_END
            a, t, by_base, online = a[ok], t[ok].astype(np.int64), by_base[ok], online[ok]
            sku = t_idx[rng.choice(t_idx.size, a.size, p=t_p)]
            q = np.where(cat.consumable[sku], 1 + rng.poisson(0.3, a.size), 1).astype(np.int64)
            p_cust.append(a)
            p_t.append(t)
            p_sku.append(sku)
            p_qty.append(q)
            p_online.append(online)
            if first_round:
                first_t[a] = t
                first_src[a] = np.where(by_base, 1, 2)
                first_sku[a] = sku
                first_round = False
            n_pur[a] += 1
            # returns of these target purchases: own return order, 1-40 days later
            tr = t + rng.integers(86_400, 40 * 86_400, a.size)
            ret = (rng.random(a.size) < _RETURN_RATE) & (tr < T_END)
            full = (q == 1) | (rng.random(a.size) < 0.5)
            rq = np.where(full, q, 1 + (rng.random(a.size) * (q - 1)).astype(np.int64))
            r_on = rng.random(a.size) < online_share[a]
            tr = _shop_time(tr, r_on).astype(np.int64)
            r_cust_t.append(a[ret])
            r_t_t.append(tr[ret])
            r_sku_t.append(sku[ret])
            r_qty_t.append(rq[ret])
            r_online_t.append(r_on[ret])
            r_full_t.append(full[ret])
            again = ret & full
            n_ret[a[again]] += 1
            active, start = a[again], tr[again].astype(float)
        who = np.flatnonzero(np.isfinite(hold) | (n_pur > 0))
        planted.append(
            (
                who,
                np.where(np.isfinite(hold[who]), hold[who], np.nan),
                first_t[who],
                first_src[who],
                first_sku[who],
                n_pur[who],
                n_ret[who],
            )
        )

    # target orders: one order per planted purchase, plus filler lines (never planted SKUs)
    t_cust = np.concatenate(p_cust)
    t_t = np.concatenate(p_t)
    t_sku = np.concatenate(p_sku)
    qty_t = np.concatenate(p_qty)
    t_online = np.concatenate(p_online)
    T = len(t_cust)
    t_order = n_general + np.arange(T)
    cents_t = cat.price_cents[t_sku] * qty_t
    n_fill = rng.poisson(0.8, T)
    f_order_local = np.repeat(np.arange(T), n_fill)
    f_cust = t_cust[f_order_local]
    f_sku, f_qty, f_cents = _draw_lines(
        rng, cat, gen_cats, gen_p, fav, nfav, f_cust, t_t[f_order_local] // 86_400
    )
    ok = ~planted_mask[f_sku]
    f_order = t_order[f_order_local][ok]
    f_sku, f_qty, f_cents = f_sku[ok], f_qty[ok], f_cents[ok]
    keep = _dedupe(f_order, f_sku, nsku)
    f_order, f_sku, f_qty, f_cents = f_order[keep], f_sku[keep], f_qty[keep], f_cents[keep]
    # target returns: each in a return-only order of its own
    tr_cust = np.concatenate(r_cust_t)
    tr_t = np.concatenate(r_t_t)
    tr_sku = np.concatenate(r_sku_t)
    tr_qty = np.concatenate(r_qty_t)
    tr_online = np.concatenate(r_online_t)
    tr_order = n_general + T + np.arange(len(tr_cust))
    tr_cents = -(cat.price_cents[tr_sku] * tr_qty)

    n_general = len(l_order)
    o_cust = np.concatenate([o_cust, t_cust, tr_cust])
    o_t = np.concatenate([o_t, t_t, tr_t])
    o_online = np.concatenate([o_online, t_online, tr_online])
    l_order = np.concatenate([l_order, f_order, t_order])
    l_sku = np.concatenate([l_sku, f_sku, t_sku])
    l_qty = np.concatenate([l_qty, f_qty, qty_t])
    l_cents = np.concatenate([l_cents, f_cents, cents_t])
    n_other = n_general + len(f_order)  # general and filler lines come first
    O2 = len(o_cust)

    # ---- returns of other lines: a negative line in a later order of the same customer -------
    ret = np.flatnonzero(rng.random(n_other) < _RETURN_RATE)
    r_cust = o_cust[l_order[ret]]
    r_time = o_t[l_order[ret]] + rng.integers(86_400, 40 * 86_400, len(ret))
    q = l_qty[ret]
    full = (q == 1) | (rng.random(len(ret)) < 0.5)
    full &= ~ante_mask[l_sku[ret]]  # antecedent SKUs are only ever returned in part
    inside = (r_time < T_END) & (full | (q >= 2))
    ret, r_cust, r_time = ret[inside], r_cust[inside], r_time[inside]
    q, full = q[inside], full[inside]
    r_qty = np.where(full, q, 1 + (rng.random(len(ret)) * (q - 1)).astype(np.int64))
    r_cents = -np.round(l_cents[ret] * r_qty / q).astype(np.int64)
    # attach to the customer's next order within 14 days of the return, else a new return order
    okey = o_cust.astype(np.int64) * (1 << 32) + o_t
    osort = np.argsort(okey, kind="stable")
    pos = np.searchsorted(okey[osort], r_cust.astype(np.int64) * (1 << 32) + r_time)
    cand = osort[np.minimum(pos, O2 - 1)]
    attach = (pos < O2) & (o_cust[cand] == r_cust) & (o_t[cand] - r_time < 14 * 86_400)
    new = ~attach
    n_new = int(new.sum())
    r_order = np.empty(len(ret), dtype=np.int64)
    r_order[attach] = cand[attach]
    r_order[new] = O2 + np.arange(n_new)
    r_online = rng.random(n_new) < online_share[r_cust[new]]
    o_cust = np.concatenate([o_cust, r_cust[new]])
    o_t = np.concatenate([o_t, _shop_time(r_time[new], r_online).astype(np.int64)])
    o_online = np.concatenate([o_online, r_online])
    n_full = int((r_qty == q).sum() + np.concatenate(r_full_t).sum())
    quirks = {
        "return_lines": len(ret) + len(tr_cust),
        "full_returns": n_full,
        "partial_returns": len(ret) + len(tr_cust) - n_full,
        "return_only_orders": n_new + len(tr_cust),
    }

    # ---- quirks on general lines of non-planted SKUs ----------------------------------------
    eligible = np.flatnonzero(~planted_mask[l_sku[:n_other]])
    u = rng.random(len(eligible))
    unknown = eligible[u < _UNKNOWN_SKU_RATE]
    zero = eligible[(u >= _UNKNOWN_SKU_RATE) & (u < _UNKNOWN_SKU_RATE + _ZERO_QTY_RATE)]
    zero = zero[~np.isin(zero, ret)]  # a returned line keeps its quantity
    l_sku[unknown] = nsku + rng.integers(0, len(UNKNOWN_SKUS), len(unknown))
    l_qty[zero] = 0
    l_cents[zero] = 0
    L = len(l_order)
    dup = np.flatnonzero(rng.random(L) < _DUPLICATE_RATE)
    dup = dup[l_qty[dup] > 0]
    l_order = np.concatenate([l_order, r_order, tr_order, l_order[dup]])
    l_sku = np.concatenate([l_sku, l_sku[ret], tr_sku, l_sku[dup]])
    l_qty = np.concatenate([l_qty, -r_qty, -tr_qty, l_qty[dup]])
    l_cents = np.concatenate([l_cents, r_cents, tr_cents, l_cents[dup]])
    quirks.update(
        unknown_sku_lines=int((l_sku >= nsku).sum()),
        zero_quantity_lines=len(zero),
        duplicate_lines=len(dup),
    )

    return Chunk(
        n=n,
        breadth=breadth,
        nfav=nfav,
        online_share=online_share,
        n_general_orders=n_orders,
        has_email=has_email,
        domain=domain,
        consent=consent,
        consent_day=consent_day,
        birth_day=birth_day,
        age_known=age_known,
        region=region,
        supp_cust=supp_cust,
        supp_reason=supp_reason,
        supp_day=supp_day,
        o_cust=o_cust,
        o_t=o_t,
        o_online=o_online,
        l_order=l_order,
        l_sku=l_sku,
        l_qty=l_qty,
        l_cents=l_cents,
        planted=planted,
        quirks=quirks,
    )


# --------------------------------------------------------------------------------------------
