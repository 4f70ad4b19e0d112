"""The rules planted in the sample's order history, with their true 30-day rates."""

from __future__ import annotations

import copy
from typing import Any

from reachlist.sample.catalogue import KEY_SKUS

# --------------------------------------------------------------------------------------------
# Planted rules. Hazards are 30-day purchase probabilities of a constant hazard:
#   rule hazard (customer holds the whole antecedent, lacks the target): hazard_30d, any breadth
#   base hazard (everyone else): 1 - (1 - base_hazard_30d) ** breadth  (breadth has mean 1)
# "holds" for the process = has a positive-quantity line of it; the target is bought at most once.
# --------------------------------------------------------------------------------------------

PLANTED_RULES: tuple[dict[str, Any], ...] = (
    {
        "rule_id": "heated-mat",
        "antecedent_level": "sku",
        "antecedent": (KEY_SKUS["propagator"], KEY_SKUS["seed_compost"]),
        "target_level": "sku",
        "target": KEY_SKUS["heated_mat"],
        "hazard_30d": 0.25,
        "base_hazard_30d": 0.02,
        "purpose": "introduce",
        "description": "propagator + seed compost -> heated seedling mat (2-item antecedent)",
    },
    {
        "rule_id": "patio-cleaner",
        "antecedent_level": "sku",
        "antecedent": (KEY_SKUS["pressure_washer"],),
        "target_level": "sku",
        "target": KEY_SKUS["patio_cleaner"],
        "hazard_30d": 0.20,
        "base_hazard_30d": 0.015,
        "purpose": "introduce",
        "description": "pressure washer -> patio cleaner (1-item antecedent)",
    },
    {
        "rule_id": "frost-fleece",
        "antecedent_level": "sku",
        "antecedent": (KEY_SKUS["mini_greenhouse"],),
        "target_level": "sku",
        "target": KEY_SKUS["frost_fleece"],
        "hazard_30d": 0.15,
        "base_hazard_30d": 0.02,
        "purpose": "clear",
        "description": "mini greenhouse -> frost fleece (clearance target, 1,200 units in stock)",
    },
    {
        "rule_id": "bird-feeders",
        "antecedent_level": "category",
        "antecedent": ("Bird Food",),
        "target_level": "category",
        "target": "Bird Feeders & Tables",
        "hazard_30d": 0.12,
        "base_hazard_30d": 0.02,
        "purpose": "introduce",
        "description": "category Bird Food -> category Bird Feeders & Tables",
    },
    {
        "rule_id": "butane-refill",
        "antecedent_level": "sku",
        "antecedent": (KEY_SKUS["weed_burner"],),
        "target_level": "sku",
        "target": KEY_SKUS["butane_refill"],
        "hazard_30d": 0.30,
        "base_hazard_30d": 0.015,
        "purpose": "introduce",
        "description": "gas weed burner -> butane refill cans (age-restricted target)",
    },
    {
        "rule_id": "indoor-pots",
        "antecedent_level": "sku",
        "antecedent": (KEY_SKUS["houseplant_feed"],),
        "target_level": "category",
        "target": "Indoor Pots & Planters",
        "hazard_30d": 0.10,
        "base_hazard_30d": 0.02,
        "purpose": "introduce",
        "description": "houseplant feed -> category Indoor Pots & Planters (stand-in for the "
        "brand-new self-watering planter)",
    },
)


def planted_rules() -> list[dict[str, Any]]:
    """The planted rules as a list of dicts (a fresh copy; safe to modify).

    Keys: rule_id, antecedent_level ('sku'|'category'), antecedent (tuple of SKUs or category
    names; a customer holds it when they hold every element), target_level ('sku'|'category'),
    target (SKU or category name), hazard_30d (30-day take-up of a holder lacking the target),
    base_hazard_30d (30-day take-up of a non-holder at breadth 1; scales as
    1 - (1 - base) ** breadth), purpose ('introduce'|'clear'), description.
    """
    return [copy.deepcopy(dict(r)) for r in PLANTED_RULES]
