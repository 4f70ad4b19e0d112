"""reachlist.mining against reference libraries on generated baskets.

The baskets are invented (a fixed seed): a few thousand baskets over 48 items with skewed
popularity and a few shopper segments that favour some items, so that items are correlated.
Checks: the same frequent itemsets and counts as mlxtend (fpgrowth), pyfim (fim.fpgrowth) and
efficient-apriori; the same rule measures as mlxtend.association_rules for every rule toward several
targets; p-values equal to scipy.stats.fisher_exact(table, alternative="greater").

Library quirks allowed for (documented in ../shared/reference/check-values.json `library_quirks`):
FIM-1 (pyfim omits an itemset held by every basket), MLX-1 (mlxtend reports conviction = inf also
in the 0/0 case), EA-1 (efficient-apriori's conviction; not compared here).
"""

from __future__ import annotations

import math

import numpy as np
import pytest
from scipy.stats import fisher_exact

from reachlist.baskets import Baskets
from reachlist.mining import frequent_itemsets, target_rules, top_rules
from tests.reference_data import check_values

pd = pytest.importorskip("pandas")
fp = pytest.importorskip("mlxtend.frequent_patterns")
fim = pytest.importorskip("fim")
efficient_apriori = pytest.importorskip("efficient_apriori")

N_BASKETS = 3000
N_ITEMS = 48
MIN_COUNT = 45  # 1.5% of the baskets
MAX_LEN = 4


def _generate(seed: int = 20240611) -> list[list[str]]:
    """Invented baskets: Zipf-like popularity, 5 segments with favoured items."""
    rng = np.random.default_rng(seed)
    base = 1.0 / np.arange(1, N_ITEMS + 1) ** 0.9
    names = np.array([f"item{k:02d}" for k in range(N_ITEMS)])
    seg_weights = []
    for _ in range(5):
        w = base.copy()
        fav = rng.choice(N_ITEMS, 5, replace=False)
        w[fav] *= 6.0
        seg_weights.append(w / w.sum())
    out = []
    for _ in range(N_BASKETS):
        w = seg_weights[rng.integers(0, 5)]
        size = max(1, rng.poisson(5))
        out.append(sorted(set(names[rng.choice(N_ITEMS, size=size, p=w)].tolist())))
    return out


TRANSACTIONS = _generate()
BASKETS = Baskets.from_transactions(TRANSACTIONS)


@pytest.fixture(scope="module")
def ours() -> dict[frozenset, int]:
    df = frequent_itemsets(BASKETS, MIN_COUNT, MAX_LEN)
    return {frozenset(r["items"]): r["count"] for r in df.iter_rows(named=True)}


@pytest.fixture(scope="module")
def onehot():
    items = sorted({x for t in TRANSACTIONS for x in t})
    col = {x: k for k, x in enumerate(items)}
    m = np.zeros((len(TRANSACTIONS), len(items)), dtype=bool)
    for r, t in enumerate(TRANSACTIONS):
        m[r, [col[x] for x in t]] = True
    return pd.DataFrame(m, columns=items)


@pytest.fixture(scope="module")
def mlx_itemsets(onehot):
    return fp.fpgrowth(
        onehot, min_support=MIN_COUNT / N_BASKETS, use_colnames=True, max_len=MAX_LEN
    )


def test_data_is_not_trivial(ours) -> None:
    sizes = [len(s) for s in ours]
    assert len(ours) > 200 and max(sizes) >= 3, "generated baskets should give deep itemsets"


def test_same_itemsets_as_mlxtend_fpgrowth(ours, mlx_itemsets) -> None:
    theirs = {
        frozenset(s): round(sup * N_BASKETS)
        for s, sup in zip(mlx_itemsets["itemsets"], mlx_itemsets["support"], strict=True)
    }
    assert ours == theirs


def test_same_itemsets_as_pyfim_fpgrowth(ours) -> None:
    out = fim.fpgrowth(TRANSACTIONS, supp=-MIN_COUNT, zmin=1, zmax=MAX_LEN, report="a")
    theirs = {frozenset(s): c for s, c in out}
    # FIM-1: pyfim leaves out an itemset held by every basket; none is, on these baskets
    assert not any(c == N_BASKETS for c in ours.values())
    assert ours == theirs


def test_same_itemsets_as_efficient_apriori(ours) -> None:
    itemsets, _ = efficient_apriori.apriori(
        [tuple(t) for t in TRANSACTIONS],
        min_support=MIN_COUNT / N_BASKETS,
        min_confidence=1.0,
        max_length=MAX_LEN,
    )
    theirs = {frozenset(s): c for level in itemsets.values() for s, c in level.items()}
    assert ours == theirs


def test_pyfim_quirk_fim1_itemset_in_every_basket() -> None:
    # Source: check-values.json library_quirks FIM-1 (the call and pyfim's output are recorded)
    quirk = {q["id"]: q for q in _quirks()}["FIM-1"]
    tracts = [("a", "b"), ("a", "c"), ("a", "b", "c")]
    theirs = {frozenset(s.split("|")): c for s, c in quirk["returned"]}
    missing = {frozenset(s.split("|")): c for s, c in quirk["missing"]}
    live = {frozenset(s): c for s, c in fim.fpgrowth(tracts, supp=-1, zmin=1, report="a")}
    assert live == theirs  # the installed pyfim still behaves as recorded
    df = frequent_itemsets(Baskets.from_transactions(tracts), 1)
    assert {frozenset(r["items"]): r["count"] for r in df.iter_rows(named=True)} == {
        **theirs,
        **missing,
    }


def _quirks() -> list[dict]:
    return check_values()["library_quirks"]


def _targets() -> list[str]:
    """Consequents of several popularities: the most common item, a middling and a rarer one."""
    order = np.argsort(-BASKETS.item_counts, kind="stable")
    return [str(BASKETS.labels[order[k]]) for k in (0, 3, 10, 20)]


@pytest.fixture(scope="module")
def mlx_rules(mlx_itemsets):
    return fp.association_rules(
        mlx_itemsets, num_itemsets=N_BASKETS, metric="confidence", min_threshold=0.0
    )


@pytest.mark.parametrize("target", _targets())
def test_rule_measures_as_mlxtend(mlx_rules, target: str) -> None:
    one = mlx_rules[mlx_rules["consequents"].apply(lambda s: s == frozenset([target]))]
    theirs = {frozenset(row["antecedents"]): row for row in one.to_dict("records")}
    df = target_rules(
        BASKETS, target, min_count=MIN_COUNT, max_antecedent=MAX_LEN - 1, keep_unproductive=True
    )
    mine = {frozenset(r["antecedent"]): r for r in df.iter_rows(named=True)}
    assert mine
    assert set(mine) == set(theirs)
    for key, r in mine.items():
        t = theirs[key]
        assert math.isclose(r["support"], t["support"], rel_tol=1e-12)
        assert math.isclose(r["coverage"], t["antecedent support"], rel_tol=1e-12)
        assert math.isclose(
            r["n_consequent"] / r["n_baskets"], t["consequent support"], rel_tol=1e-12
        )
        assert math.isclose(r["confidence"], t["confidence"], rel_tol=1e-12)
        assert math.isclose(r["lift"], t["lift"], rel_tol=1e-12)
        assert math.isclose(r["leverage"], t["leverage"], rel_tol=1e-9, abs_tol=1e-15)
        if r["confidence"] == 1.0:  # MLX-1: inf also when P(y) = 1, where ours is NaN
            assert math.isinf(t["conviction"])
            assert math.isinf(r["conviction"]) or r["n_consequent"] == r["n_baskets"]
        else:
            assert math.isclose(r["conviction"], t["conviction"], rel_tol=1e-12)


@pytest.mark.parametrize("target", _targets())
def test_p_values_as_scipy_fisher_exact(target: str) -> None:
    df = target_rules(
        BASKETS, target, min_count=MIN_COUNT, max_antecedent=3, keep_unproductive=True
    )
    n = BASKETS.n_baskets
    for r in df.iter_rows(named=True):
        a, x, y = r["n_both"], r["n_antecedent"], r["n_consequent"]
        table = [[a, x - a], [y - a, n - x - y + a]]
        p = fisher_exact(table, alternative="greater").pvalue
        assert math.isclose(r["p_value"], p, rel_tol=1e-9, abs_tol=1e-300), (r["antecedent"], p)


def test_top_rules_match_mlxtend_for_every_consequent(mlx_rules) -> None:
    single = mlx_rules[mlx_rules["consequents"].apply(len) == 1]
    theirs = {
        (frozenset(a), next(iter(c))): (s, conf, lift)
        for a, c, s, conf, lift in zip(
            single["antecedents"],
            single["consequents"],
            single["support"],
            single["confidence"],
            single["lift"],
            strict=True,
        )
    }
    df = top_rules(BASKETS, top=None, min_count=MIN_COUNT, max_size=MAX_LEN, keep_unproductive=True)
    mine = {
        (frozenset(r["antecedent"]), r["consequent"]): (r["support"], r["confidence"], r["lift"])
        for r in df.iter_rows(named=True)
    }
    assert set(mine) == set(theirs)
    for key, vals in mine.items():
        assert all(
            math.isclose(u, v, rel_tol=1e-12) for u, v in zip(vals, theirs[key], strict=True)
        )


def test_holm_and_bonferroni_as_statsmodels() -> None:
    multitest = pytest.importorskip("statsmodels.stats.multitest")
    df = top_rules(
        BASKETS,
        top=None,
        min_count=MIN_COUNT,
        max_size=3,
        keep_unproductive=True,
        correction="holm",
    )
    p = df["p_value"].to_numpy()
    assert np.allclose(
        df["p_adjusted"].to_numpy(),
        multitest.multipletests(p, method="holm")[1],
        rtol=1e-12,
        atol=0,
    )
    assert (df["n_tested"] == len(p)).all()  # the family is every candidate rule
    bonf = top_rules(
        BASKETS,
        top=None,
        min_count=MIN_COUNT,
        max_size=3,
        keep_unproductive=True,
        correction="bonferroni",
    )
    assert np.allclose(
        bonf["p_adjusted"].to_numpy(),
        multitest.multipletests(bonf["p_value"].to_numpy(), method="bonferroni")[1],
        rtol=1e-12,
        atol=0,
    )
