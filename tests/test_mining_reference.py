"""reachlist.mining against published worked examples (../shared/reference/check-values.json).

Every example of the file is checked: all frequent itemsets and their counts (the lists are
complete), and every rule with a single-item consequent (ours have one) with each measure:
counts, support, coverage, confidence, lift, leverage, conviction and the one-sided Fisher p-value.
Contingency-table examples are built as weighted baskets (each row of the table repeated).

Each test id starts with the example id; SOURCES below names the publication of each example
(the file's `source` field, shortened; the full text is in every assertion message). A value the
file marks provenance "from memory" (attributed from recollection only) is checked in a test
whose id contains "from memory", and its messages say so.
"""

from __future__ import annotations

import math
from fractions import Fraction

import polars as pl
import pytest

from reachlist.baskets import Baskets
from reachlist.mining import frequent_itemsets, rules_from_itemsets, target_rules, top_rules
from tests.reference_data import check_values

DATA = check_values()  # tests/data/reference/check-values.json, a copy of the shared values
EXAMPLES = {e["id"]: e for e in DATA["examples"]}

# Source of each example (shortened from check-values.json `source`):
SOURCES = {
    # Source: Han, Kamber & Pei, Data Mining 3e (2012), Table 6.1, Examples 6.3-6.5
    "han_kamber_pei_3e_allelectronics": "Han, Kamber & Pei 3e, Table 6.1",
    # Source: Tan, Steinbach & Kumar, Introduction to Data Mining (2005), Table 6.1
    "tan_steinbach_kumar_market_basket": "Tan, Steinbach & Kumar 2005, Table 6.1",
    # Source: Agrawal & Srikant, VLDB 1994, Figure 3 (database D)
    "agrawal_srikant_1994_example": "Agrawal & Srikant 1994, Figure 3",
    # Source: Han, Pei & Yin, SIGMOD 2000, Table 1
    "han_pei_yin_2000_fp_tree": "Han, Pei & Yin 2000, Table 1",
    # Source: Han, Kamber & Pei 3e, Exercise 6.6 data, values printed in the mlxtend user guide
    "han_exercise_monkey_mlxtend_docs": "Han, Kamber & Pei 3e, Exercise 6.6 / mlxtend user guide",
    # Source: efficient-apriori 2.0.6 README, 'Example' section
    "efficient_apriori_readme": "efficient-apriori 2.0.6 README",
    # Source: Han, Kamber & Pei 3e, Section 6.3, Examples 6.7-6.9 (games and videos)
    "han_kamber_pei_3e_games_videos": "Han, Kamber & Pei 3e, Examples 6.7-6.9",
    # Source: Han, Kamber & Pei 3e, Table 6.9, data sets D1..D6
    **{
        f"han_kamber_pei_3e_table6_9_D{k}": f"Han, Kamber & Pei 3e, Table 6.9 D{k}"
        for k in range(1, 7)
    },
    # Source: Brin, Motwani & Silverstein, SIGMOD 1997 (tea and coffee)
    "brin_motwani_silverstein_1997_tea_coffee": "Brin, Motwani & Silverstein 1997",
    # Source: Tan, Steinbach & Kumar 2005, Section 6.7.1, Table 6.8 (beverage preferences)
    "tan_steinbach_kumar_tea_coffee": "Tan, Steinbach & Kumar 2005, Table 6.8",
    # Source: Fisher, The Design of Experiments (1935), as tabulated in Agresti 2002, Table 3.8
    "fisher_tea_tasting": "Fisher 1935 / Agresti 2002, Table 3.8",
    # Source: R package LDtests, Fisher1sided documented example
    "ldtests_fisher1sided_doc_example": "LDtests Fisher1sided example",
    # Source: Tan, Kumar & Srivastava, SIGKDD 2002, contingency tables E1..E10
    **{
        f"tan_kumar_srivastava_2002_E{k}": f"Tan, Kumar & Srivastava 2002, E{k}"
        for k in range(1, 11)
    },
}

MEASURES = ("support", "coverage", "confidence", "lift", "leverage", "conviction")
COUNTS = {
    "support_count": "n_both",
    "coverage_count": "n_antecedent",
    "consequent_count": "n_consequent",
}
BIG = 64  # "no limit" for antecedent / itemset sizes in these small examples


def test_every_example_has_a_named_source() -> None:
    assert set(SOURCES) == set(EXAMPLES), "name the source of every example in SOURCES"


def _baskets(ex: dict) -> Baskets:
    if ex["kind"] == "transactions":
        return Baskets.from_transactions(ex["transactions"])
    rows = ex["weighted_transactions"]
    return Baskets.from_transactions([r["items"] for r in rows], counts=[r["count"] for r in rows])


def _expected_float(v: object) -> float:
    """A measure's expected value: {'value': ..} or the strings 'inf' / 'undefined (0/0)'."""
    if isinstance(v, dict):
        v = v["value"]
    if v == "inf":
        return math.inf
    if isinstance(v, str) and v.startswith("undefined"):
        return math.nan
    return float(v)


def _same(ours: float, expected: float, rel: float = 1e-12) -> bool:
    if math.isnan(expected):
        return math.isnan(ours)
    if math.isinf(expected):
        return ours == expected
    return math.isclose(ours, expected, rel_tol=rel, abs_tol=1e-300)


def _provenance_cases(kind: str) -> list:
    """(example id, provenance) pairs, one test case each, with the source in the test id."""
    cases = []
    for ex_id, ex in EXAMPLES.items():
        if kind == "itemsets":
            provs = {i["provenance"] for i in ex.get("expected_itemsets", [])}
        elif kind == "rules":
            provs = {r["provenance"] for r in _single_consequent(ex)}
        else:  # published printed values
            provs = {p for _, _, _, p in _published(ex)}
        for prov in sorted(provs):
            cases.append(pytest.param(ex_id, prov, id=f"{ex_id}-{prov}-{SOURCES.get(ex_id, '?')}"))
    return cases


def _single_consequent(ex: dict) -> list[dict]:
    return [r for r in ex["expected_rules"] if len(r["consequent"]) == 1]


def _published(ex: dict):
    """(rule, measure, printed entry, provenance) for printed values of our measures."""
    out = []
    for r in _single_consequent(ex):
        for measure, entry in (r.get("published") or {}).items():
            if measure in MEASURES or measure == "fisher_p_greater":
                out.append((r, measure, entry, entry.get("provenance", r["provenance"])))
    return out


def _note(ex_id: str, prov: str) -> str:
    memo = " [value attributed FROM MEMORY in check-values.json]" if prov == "from memory" else ""
    return f"{ex_id} ({EXAMPLES[ex_id]['source']}){memo}"


def _rule_table(ex: dict) -> dict[tuple[frozenset, str], dict]:
    """Our rules toward every consequent of the example, keyed by (antecedent, consequent)."""
    b = _baskets(ex)
    min_count = ex.get("rule_min_support_count", 1)
    found = {}
    for y in sorted({r["consequent"][0] for r in ex["expected_rules"]}):
        df = target_rules(
            b, y, min_count=min_count, max_antecedent=BIG, keep_unproductive=True, correction="none"
        )
        for row in df.iter_rows(named=True):
            found[(frozenset(row["antecedent"]), row["consequent"])] = row
    return found


# ---- frequent itemsets ---------------------------------------------------------------------


def _example_cases(kind: str, transactions_only: bool = False) -> list:
    """One case per example; the id says "from memory" when some value checked is so marked."""
    cases = []
    for k, e in EXAMPLES.items():
        if transactions_only and e["kind"] != "transactions":
            continue
        values = e.get("expected_itemsets", []) if kind == "itemsets" else _single_consequent(e)
        memo = any(v["provenance"] == "from memory" for v in values)
        tag = "incl. from memory" if memo else "published or recomputed"
        cases.append(pytest.param(k, id=f"{k}-{tag}-{SOURCES.get(k, '?')}"))
    return cases


@pytest.mark.parametrize("ex_id", _example_cases("itemsets", transactions_only=True))
def test_frequent_itemsets_complete(ex_id: str) -> None:
    """The set of frequent itemsets equals the published (complete) list."""
    ex = EXAMPLES[ex_id]
    assert ex["expected_itemsets_complete"]
    ours = frequent_itemsets(_baskets(ex), ex["min_support_count"])
    got = {frozenset(r["items"]) for r in ours.iter_rows(named=True)}
    # the list also holds some infrequent candidates (frequent: false) with their counts
    want = {frozenset(i["items"]) for i in ex["expected_itemsets"] if i.get("frequent", True)}
    provs = sorted({i["provenance"] for i in ex["expected_itemsets"]})
    assert got == want, f"{_note(ex_id, 'from memory' if 'from memory' in provs else provs[0])}"


@pytest.mark.parametrize("ex_id, provenance", _provenance_cases("itemsets"))
def test_itemset_counts(ex_id: str, provenance: str) -> None:
    """Count and support of every expected itemset of this provenance (infrequent candidates:
    counted with Baskets.count and absent from the frequent itemsets)."""
    ex = EXAMPLES[ex_id]
    b = _baskets(ex)
    ours = {
        frozenset(r["items"]): r
        for r in frequent_itemsets(b, ex["min_support_count"]).iter_rows(named=True)
    }
    for item in ex["expected_itemsets"]:
        if item["provenance"] != provenance:
            continue
        what = f"{item['items']}: {_note(ex_id, provenance)}"
        assert b.count(item["items"]) == item["count"], what
        row = ours.get(frozenset(item["items"]))
        if not item.get("frequent", True):
            assert row is None, f"infrequent itemset reported: {what}"
            continue
        assert row is not None, f"missing: {what}"
        assert row["count"] == item["count"], what
        assert _same(row["support"], _expected_float(item["support"])), what
        assert Fraction(row["count"], ex["n_transactions"]) == Fraction(item["support"]["exact"])


# ---- rules ---------------------------------------------------------------------------------


@pytest.mark.parametrize("ex_id", _example_cases("rules"))
def test_rule_set_complete(ex_id: str) -> None:
    """Our one-consequent rules are exactly the expected ones (every confidence), both through
    target_rules (per consequent) and through top_rules / rules_from_itemsets (all at once)."""
    ex = EXAMPLES[ex_id]
    want = {(frozenset(r["antecedent"]), r["consequent"][0]) for r in _single_consequent(ex)}
    provs = {r["provenance"] for r in _single_consequent(ex)}
    note = _note(ex_id, "from memory" if "from memory" in provs else "")
    assert set(_rule_table(ex)) == want, note
    b = _baskets(ex)
    min_count = ex.get("rule_min_support_count", 1)
    all_rules = top_rules(b, top=None, min_count=min_count, max_size=BIG, keep_unproductive=True)
    got = {(frozenset(r["antecedent"]), r["consequent"]) for r in all_rules.iter_rows(named=True)}
    if ex["kind"] == "transactions":
        assert got == want, note
    else:  # a contingency example lists only X -> Y, not Y -> X
        assert want <= got, note
    again = rules_from_itemsets(
        frequent_itemsets(b, min_count), b.n_baskets, keep_unproductive=True
    )
    assert again.sort("rule_id").equals(all_rules.sort("rule_id")), note


@pytest.mark.parametrize("ex_id, provenance", _provenance_cases("rules"))
def test_rule_measures(ex_id: str, provenance: str) -> None:
    """Counts, support, coverage, confidence, lift, leverage, conviction, one-sided Fisher p."""
    ex = EXAMPLES[ex_id]
    ours = _rule_table(ex)
    for r in _single_consequent(ex):
        if r["provenance"] != provenance:
            continue
        key = (frozenset(r["antecedent"]), r["consequent"][0])
        row = ours[key]
        what = f"{r['antecedent']} -> {r['consequent']}: {_note(ex_id, provenance)}"
        for field, col in COUNTS.items():
            if field in r:
                assert row[col] == r[field], f"{col} of {what}"
        for m in MEASURES:
            assert _same(row[m], _expected_float(r[m])), f"{m}={row[m]} vs {r[m]} for {what}"
            exact = r[m].get("exact") if isinstance(r[m], dict) else None
            if exact is not None:  # the exact rational, to the last bit or one rounding step
                assert math.isclose(row[m], float(Fraction(exact)), rel_tol=4e-16, abs_tol=1e-300)
        p = r["fisher_p_greater"]
        assert _same(row["p_value"], _expected_float(p), rel=1e-9), f"p_value of {what}"
        if p.get("exact") is not None:
            assert math.isclose(row["p_value"], float(Fraction(p["exact"])), rel_tol=1e-9)


@pytest.mark.parametrize("ex_id, provenance", _provenance_cases("published"))
def test_printed_values(ex_id: str, provenance: str) -> None:
    """Values as printed in the source, to the printed number of decimals. Where the file notes a
    disagreement (a truncated or misprinted value), ours rounds to the recomputed value instead."""
    ex = EXAMPLES[ex_id]
    ours = _rule_table(ex)
    for r, measure, entry, prov in _published(ex):
        if prov != provenance:
            continue
        row = ours[(frozenset(r["antecedent"]), r["consequent"][0])]
        value = row["p_value"] if measure == "fisher_p_greater" else row[measure]
        target = entry["value"] if entry["agrees"] else entry["recomputed_rounded"]
        assert round(value, entry["decimals"]) == pytest.approx(target, abs=1e-12), (
            f"{measure} printed {entry['printed']!r}: {_note(ex_id, provenance)}"
        )


def test_contingency_examples_have_one_rule() -> None:
    # Source: every contingency_2x2 example of check-values.json (see SOURCES)
    for ex_id, ex in EXAMPLES.items():
        if ex["kind"] != "contingency_2x2":
            continue
        t = ex["table"]
        b = _baskets(ex)
        assert b.n_baskets == t["N"], ex_id
        df = target_rules(b, ex["Y"], min_count=1, keep_unproductive=True, correction="none")
        row = df.filter(pl.col("antecedent") == pl.lit([ex["X"]])).row(0, named=True)
        assert (
            row["n_both"],
            row["n_antecedent"] - row["n_both"],
            row["n_consequent"] - row["n_both"],
        ) == (t["n_XY"], t["n_X_notY"], t["n_notX_Y"])
