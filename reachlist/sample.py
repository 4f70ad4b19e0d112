"""The sample warehouse: a fictional garden-and-home supply retailer, generated deterministically.

``build_sample(path, customers=20_000, seed=7)`` writes a DuckDB file that follows the warehouse
contract (customers, products, orders, order_lines, suppressions) plus ``sample_*`` tables that
hold the generator's ground truth. Everything is invented: the retailer, the SKUs, the names.

How the order history is made (all numpy, vectorised, in chunks of customers):

* every customer has a latent *breadth* (gamma, mean 1). Breadth sets how many categories the
  customer favours, how many orders they place, and how fast they buy every planted target at
  the base rate, so raw co-purchase rules partly reflect breadth (as in real retail);
* general orders: seasonal order dates, 1 + Poisson(1.6) lines each, categories drawn from the
  customer's favoured set (5% exploration), SKUs by popularity inside the category;
* planted rules (``PLANTED_RULES``): the target of each rule is never drawn by the general
  process. Each customer buys it (once) according to a piecewise-constant hazard: the base
  hazard (scaled by breadth) until the customer first holds the whole antecedent, then the rule
  hazard (not scaled by breadth). Because hazards are constant and exponential waiting times are
  memoryless, the 30-day take-up of an antecedent holder who lacks the target at any cutoff is
  exactly ``hazard_30d``;
* quirks: returns (negative lines in a later order of the same customer, most cancelling the
  whole purchase), exact duplicate lines, zero-quantity lines, lines with SKUs missing from
  products, customers without consent / age / email, a suppression list.

See sample_warehouse/README.md for the scenario, every table, the true rates and the tolerances.
"""

from __future__ import annotations

import copy
import math
import os
import time
from collections.abc import Sequence
from dataclasses import dataclass
from datetime import date, datetime, timedelta
from pathlib import Path
from typing import Any

import numpy as np
import pyarrow as pa
import pyarrow.compute as pc

from reachlist.errors import InputError, StateError

__all__ = [
    "GENERATOR_VERSION",
    "KEY_SKUS",
    "PERIOD_END",
    "PERIOD_START",
    "PLANTED_RULES",
    "SampleSummary",
    "build_sample",
    "catalog",
    "planted_rules",
]

GENERATOR_VERSION = "1"
PERIOD_START = date(2025, 1, 1)  # first order day
PERIOD_END = date(2026, 9, 30)  # last order day (inclusive)
MIN_CUSTOMERS = 500
_CHUNK = 50_000  # customers per generation chunk; fixed so results never depend on the machine

_EPOCH = datetime(PERIOD_START.year, PERIOD_START.month, PERIOD_START.day)
_DAYS = (PERIOD_END - PERIOD_START).days + 1  # 638
_T_END = _DAYS * 86_400  # seconds after the epoch; orders happen in [0, _T_END)
_MONTH = 30 * 86_400

# --------------------------------------------------------------------------------------------
# The product catalogue (fixed; it does not depend on the seed).
# Each category: (department code, category name, category weight, consumable, items)
# Each item: (name, price, weight within category, flags)  flags: "A" age-restricted,
# "R<yyyy-mm-dd>" launched recently (no sales before that day), "X" never sold (brand new).
# --------------------------------------------------------------------------------------------

_DEPARTMENTS = {
    "SG": "Seeds & Growing",
    "PC": "Composts & Plant Care",
    "TW": "Tools & Watering",
    "GP": "Greenhouse & Protection",
    "OL": "Outdoor Living",
    "WL": "Wildlife",
    "HH": "Home & Household",
}

_CATEGORIES: list[tuple[str, str, float, bool, list[tuple[str, float, float, str]]]] = [
    (
        "SG",
        "Vegetable Seeds",
        1.3,
        True,
        [
            ("Cherry tomato seeds, mixed colours", 2.49, 1.4, ""),
            ("Runner bean seeds", 2.29, 1.0, ""),
            ("Salad leaf seed mix", 1.99, 1.2, ""),
            ("Early carrot seeds", 1.89, 0.8, ""),
            ("Courgette seeds", 2.19, 0.8, ""),
            ("Chilli pepper seeds, mild", 2.49, 0.7, ""),
            ("Sweetcorn seeds", 2.29, 0.6, ""),
        ],
    ),
    (
        "SG",
        "Flower Seeds",
        1.0,
        True,
        [
            ("Giant sunflower seeds", 1.99, 1.2, ""),
            ("Sweet pea seeds, scented mix", 2.49, 1.0, ""),
            ("Wildflower meadow seed mix 100g", 6.99, 0.9, ""),
            ("Cosmos seeds", 1.99, 0.7, ""),
            ("Nasturtium seeds", 1.79, 0.6, ""),
            ("Field poppy seed mix", 1.99, 0.5, ""),
        ],
    ),
    (
        "SG",
        "Bulbs & Plug Plants",
        0.9,
        True,
        [
            ("Spring bulb mix, 40 bulbs", 9.99, 1.0, ""),
            ("Tulip bulbs, 20", 7.99, 1.0, ""),
            ("Daffodil bulbs, 25", 6.99, 0.9, ""),
            ("Bedding plug plants, 24", 12.99, 1.1, ""),
            ("Strawberry plants, 6", 11.99, 0.7, ""),
            ("Allium bulbs, 10", 8.49, 0.5, ""),
        ],
    ),
    (
        "SG",
        "Propagation",
        2.0,
        False,
        [
            ("Windowsill propagator, 24-cell", 14.99, 3.2, ""),  # rule heated-mat antecedent
            ("Seed trays, 10-pack", 6.49, 1.2, ""),
            ("Root trainer cells, 32", 9.99, 0.6, ""),
            ("Heated seedling mat 50 x 25 cm", 24.99, 0.0, ""),  # rule heated-mat target
            ("Plant labels, 100", 2.99, 0.9, ""),
            ("Dibber and widger set", 4.49, 0.5, ""),
            ("Propagator vent lid, large", 5.99, 0.4, ""),
        ],
    ),
    (
        "SG",
        "Indoor Growing",
        0.6,
        False,
        [
            ("LED grow light bar 60 cm", 34.99, 0.8, ""),
            ("Herb windowsill kit", 12.99, 1.0, ""),
            ("Hydroponic starter kit", 49.99, 0.4, ""),
            ("Mushroom growing kit", 16.99, 0.5, ""),
            ("Microgreens growing kit", 14.99, 0.8, "R2026-03-16"),
        ],
    ),
    (
        "PC",
        "Compost & Soil",
        2.2,
        True,
        [
            ("Seed and cutting compost 40 L", 7.49, 2.8, ""),  # rule heated-mat antecedent
            ("Multi-purpose compost 60 L", 8.99, 2.0, ""),
            ("Peat-free compost 50 L", 9.49, 1.3, ""),
            ("Topsoil 30 L", 4.99, 0.8, ""),
            ("Ericaceous compost 40 L", 7.99, 0.5, ""),
            ("Well-rotted manure 50 L", 6.99, 0.7, ""),
            ("Horticultural grit 20 kg", 6.49, 0.4, ""),
        ],
    ),
    (
        "PC",
        "Plant Feed",
        1.1,
        True,
        [
            ("Tomato feed 1 L", 5.49, 1.2, ""),
            ("All-purpose liquid feed 1 L", 4.99, 1.1, ""),
            ("Fish, blood and bone 3 kg", 7.99, 0.8, ""),
            ("Slow-release feed granules 1 kg", 6.99, 0.7, ""),
            ("Rose and shrub feed 1 kg", 6.49, 0.6, ""),
            ("Seaweed plant tonic 1 L", 5.99, 0.5, ""),
        ],
    ),
    (
        "PC",
        "Houseplant Care",
        0.9,
        True,
        [
            ("Houseplant feed 500 ml", 4.49, 1.5, ""),  # rule indoor-pots antecedent
            ("Houseplant potting mix 10 L", 5.99, 1.1, ""),
            ("Orchid feed 250 ml", 4.99, 0.6, ""),
            ("Leaf shine spray", 3.99, 0.5, ""),
            ("Plant mister 500 ml", 6.99, 0.6, ""),
            ("Cactus and succulent compost 5 L", 4.49, 0.5, ""),
        ],
    ),
    (
        "PC",
        "Pest & Disease Control",
        0.8,
        True,
        [
            ("Organic slug pellets 1 kg", 6.99, 1.2, ""),
            ("Sticky fly traps, 10", 4.49, 0.9, ""),
            ("Copper slug tape 4 m", 5.99, 0.7, ""),
            ("Fungus gnat traps", 4.99, 0.5, ""),
            ("Beneficial nematode slug control", 12.99, 0.6, "R2026-02-23"),
            ("Plant-oil bug spray 1 L", 6.49, 0.8, ""),
        ],
    ),
    (
        "PC",
        "Lawn Care",
        0.9,
        True,
        [
            ("Hard-wearing lawn seed 1 kg", 9.99, 1.2, ""),
            ("Lawn feed and weed 3 kg", 12.99, 1.0, ""),
            ("Lawn sand 10 kg", 8.99, 0.5, ""),
            ("Moss remover granules 5 kg", 11.99, 0.7, ""),
            ("Lawn patch repair kit", 7.99, 0.7, ""),
            ("Lawn edging strip 10 m", 9.49, 0.5, ""),
        ],
    ),
    (
        "PC",
        "Weed Control & Mulch",
        1.0,
        False,
        [
            ("Gas weed burner wand", 27.99, 2.4, ""),  # rule butane antecedent
            ("Weed-control fabric 10 m", 8.99, 1.0, ""),
            ("Long-handled weed puller", 14.99, 0.8, ""),
            ("Bark mulch 70 L", 7.49, 1.1, ""),
            ("Acetic-acid path weeder 1 L", 5.99, 0.7, ""),
            ("Paving crack brush", 4.99, 0.6, ""),
        ],
    ),
    (
        "TW",
        "Hand Tools",
        1.1,
        False,
        [
            ("Hand trowel", 7.99, 1.3, ""),
            ("Hand fork", 7.99, 1.0, ""),
            ("Folding pruning knife", 12.99, 0.5, "A"),
            ("Grafting knife", 14.99, 0.3, "A"),
            ("Kneeling pad", 5.99, 0.9, ""),
            ("Gardening gloves, medium", 4.99, 1.1, ""),
            ("Gardening gloves, large", 4.99, 1.0, ""),
            ("Bulb planter", 6.49, 0.5, ""),
        ],
    ),
    (
        "TW",
        "Digging & Raking",
        0.7,
        False,
        [
            ("Border spade", 24.99, 1.0, ""),
            ("Digging fork", 24.99, 0.9, ""),
            ("Soil rake", 17.99, 0.8, ""),
            ("Leaf rake", 12.99, 1.0, ""),
            ("Draw hoe", 14.99, 0.5, ""),
            ("Push hoe", 14.99, 0.6, ""),
        ],
    ),
    (
        "TW",
        "Cutting & Pruning",
        0.8,
        False,
        [
            ("Bypass secateurs", 14.99, 1.4, ""),
            ("Anvil loppers", 24.99, 0.8, ""),
            ("Folding pruning saw", 16.99, 0.6, ""),
            ("Hedge shears", 19.99, 0.8, ""),
            ("Grass shears", 12.99, 0.6, ""),
            ("Blade sharpening stone", 6.99, 0.4, ""),
        ],
    ),
    (
        "TW",
        "Hoses & Fittings",
        1.0,
        False,
        [
            ("Garden hose 30 m", 24.99, 1.2, ""),
            ("Hose reel cart", 39.99, 0.7, ""),
            ("Spray gun, 8 patterns", 9.99, 1.1, ""),
            ("Hose connector set", 7.49, 1.0, ""),
            ("Soaker hose 15 m", 14.99, 0.5, ""),
            ("Outdoor tap kit", 19.99, 0.4, ""),
        ],
    ),
    (
        "TW",
        "Watering & Irrigation",
        0.9,
        False,
        [
            ("Watering can 10 L", 9.99, 1.3, ""),
            ("Indoor watering can 1.5 L", 6.99, 0.8, ""),
            ("Drip irrigation kit", 29.99, 0.5, ""),
            ("Water butt 200 L", 44.99, 0.6, ""),
            ("Water butt diverter kit", 14.99, 0.4, ""),
            ("Terracotta watering spikes, 4", 8.99, 0.5, ""),
        ],
    ),
    (
        "TW",
        "Power Tools",
        1.1,
        False,
        [
            ("Electric pressure washer 1800 W", 119.00, 2.0, ""),  # rule patio-cleaner antecedent
            ("Cordless hedge trimmer", 89.00, 0.8, ""),
            ("Electric lawn mower 33 cm", 99.00, 0.9, ""),
            ("Grass trimmer 500 W", 44.99, 0.9, ""),
            ("Leaf blower vacuum", 59.99, 0.6, ""),
            ("Pressure washer patio brush head", 24.99, 0.4, ""),
        ],
    ),
    (
        "TW",
        "Fuels & Garden Gas",
        0.5,
        True,
        [
            ("Butane gas refill cans, 4-pack", 9.99, 0.0, "A"),  # rule butane target
            ("Barbecue lighter fluid 1 L", 4.49, 1.0, "A"),
            ("Methylated spirit 1 L", 4.99, 0.6, "A"),
            ("White spirit 2 L", 6.49, 0.7, "A"),
            ("Jerry can 5 L", 12.99, 0.4, ""),
        ],
    ),
    (
        "GP",
        "Greenhouses & Cold Frames",
        0.9,
        False,
        [
            ("Mini greenhouse, 4 tier", 39.99, 2.2, ""),  # rule frost-fleece antecedent
            ("Walk-in polytunnel 3 m", 149.00, 0.4, ""),
            ("Timber cold frame", 69.99, 0.6, ""),
            ("Greenhouse staging shelves", 34.99, 0.5, ""),
            ("Replacement greenhouse cover", 19.99, 0.5, ""),
            ("Max-min greenhouse thermometer", 8.99, 0.7, ""),
        ],
    ),
    (
        "GP",
        "Frost Protection",
        0.6,
        False,
        [
            ("Frost fleece 2 m x 10 m", 8.99, 0.0, ""),  # rule frost-fleece target (surplus stock)
            ("Fleece plant jackets, 3", 7.99, 1.0, ""),
            ("Cloche tunnel 3 m", 14.99, 0.7, ""),
            ("Bubble insulation 10 m", 12.99, 0.6, ""),
            ("Hessian pot wrap 5 m", 6.99, 0.5, ""),
        ],
    ),
    (
        "GP",
        "Supports & Netting",
        0.8,
        True,
        [
            ("Bamboo canes 1.8 m, 20", 6.99, 1.3, ""),
            ("Plant ties and clips set", 3.99, 1.0, ""),
            ("Pea and bean netting", 5.99, 0.7, ""),
            ("Metal obelisk plant support", 19.99, 0.5, ""),
            ("Tomato spiral supports, 5", 9.99, 0.6, ""),
            ("Fruit cage netting 4 m", 12.99, 0.4, ""),
        ],
    ),
    (
        "OL",
        "Outdoor Pots & Planters",
        1.2,
        False,
        [
            ("Terracotta pot 30 cm", 12.99, 1.3, ""),
            ("Glazed pot 40 cm", 29.99, 0.8, ""),
            ("Trough planter 80 cm", 24.99, 0.7, ""),
            ("Raised bed kit 1.2 m", 49.99, 0.6, ""),
            ("Hanging basket 35 cm", 9.99, 1.0, ""),
            ("Window box 60 cm", 11.99, 0.8, ""),
            ("Grow bags, 3-pack", 8.99, 1.0, ""),
        ],
    ),
    (
        "OL",
        "Indoor Pots & Planters",
        0.0,
        False,
        [  # rule indoor-pots target category
            ("Ceramic houseplant pot 14 cm", 8.99, 1.4, ""),
            ("Plant pot saucers, 5", 4.99, 0.9, ""),
            ("Macrame plant hanger", 9.99, 0.6, ""),
            ("Tiered plant stand", 29.99, 0.5, ""),
            ("Decorative cachepot 18 cm", 14.99, 0.8, ""),
            ("Self-watering planter 30 cm", 27.99, 0.0, "X"),  # brand new: no order history
        ],
    ),
    (
        "OL",
        "Barbecue & Outdoor Cooking",
        0.8,
        False,
        [
            ("Charcoal kettle barbecue", 79.00, 0.6, ""),
            ("Lumpwood charcoal 10 kg", 14.99, 1.3, ""),
            ("Barbecue tool set", 19.99, 0.7, ""),
            ("Barbecue cover", 16.99, 0.5, ""),
            ("Pizza stone 33 cm", 19.99, 0.4, ""),
            ("Natural firelighters, 48", 4.99, 1.0, ""),
        ],
    ),
    (
        "OL",
        "Garden Furniture",
        0.6,
        False,
        [
            ("Folding bistro set", 99.00, 0.6, ""),
            ("Two-seat garden bench", 129.00, 0.4, ""),
            ("Reclining sun lounger", 59.99, 0.5, ""),
            ("Parasol 2.5 m", 39.99, 0.6, ""),
            ("Furniture cover, large", 24.99, 0.7, ""),
            ("Seat cushions, 2", 19.99, 0.8, ""),
        ],
    ),
    (
        "OL",
        "Patio & Decking Care",
        0.7,
        True,
        [
            ("Patio cleaner concentrate 5 L", 14.99, 0.0, ""),  # rule patio-cleaner target
            ("Decking oil 2.5 L", 19.99, 1.0, ""),
            ("Stiff decking brush", 12.99, 0.8, ""),
            ("Fence paint 5 L", 17.99, 1.1, ""),
            ("Patio joint filler", 11.99, 0.5, ""),
            ("Green algae remover 1 L", 6.99, 0.8, ""),
        ],
    ),
    (
        "OL",
        "Outdoor Lighting",
        0.7,
        False,
        [
            ("Solar stake lights, 6", 19.99, 1.2, ""),
            ("Solar string lights 10 m", 14.99, 0.9, "R2026-05-04"),
            ("Motion-sensor wall light", 24.99, 0.6, ""),
            ("Solar lantern", 12.99, 0.8, ""),
            ("Festoon lights 10 m", 29.99, 0.6, ""),
        ],
    ),
    (
        "WL",
        "Bird Food",
        1.2,
        True,
        [  # rule bird-feeders antecedent category
            ("Sunflower hearts 2 kg", 9.99, 1.4, ""),
            ("Suet fat balls, 50", 11.99, 1.3, ""),
            ("Mixed wild bird seed 4 kg", 8.99, 1.2, ""),
            ("Nyjer seed 1 kg", 6.49, 0.5, ""),
            ("Suet pellets 1 kg", 5.99, 0.7, ""),
            ("Dried mealworms 500 g", 9.49, 0.6, ""),
        ],
    ),
    (
        "WL",
        "Bird Feeders & Tables",
        0.0,
        False,
        [  # rule bird-feeders target category
            ("Hanging seed feeder", 12.99, 1.4, ""),
            ("Fat ball feeder", 8.99, 1.2, ""),
            ("Timber bird table", 39.99, 0.6, ""),
            ("Ground feeding tray", 9.99, 0.6, ""),
            ("Squirrel-resistant feeder", 24.99, 0.7, ""),
            ("Window suction feeder", 11.99, 0.5, ""),
        ],
    ),
    (
        "WL",
        "Wildlife Homes",
        0.5,
        False,
        [
            ("Bee hotel", 14.99, 1.0, ""),
            ("Hedgehog house", 34.99, 0.6, ""),
            ("Nest box, 32 mm hole", 14.99, 0.9, ""),
            ("Stone-effect bird bath", 29.99, 0.6, ""),
            ("Bat box", 19.99, 0.3, ""),
            ("Butterfly feeding station", 12.99, 0.4, ""),
        ],
    ),
    (
        "HH",
        "Cleaning",
        1.0,
        True,
        [
            ("Multi-surface cleaner 750 ml", 2.49, 1.3, ""),
            ("Microfibre cloths, 10", 4.99, 1.1, ""),
            ("Outdoor yard broom", 14.99, 0.7, ""),
            ("Window cleaning kit", 12.99, 0.5, ""),
            ("Spin mop and bucket", 24.99, 0.5, ""),
            ("Disinfectant 2 L", 3.99, 0.9, ""),
        ],
    ),
    (
        "HH",
        "Indoor Lighting",
        0.7,
        False,
        [
            ("LED bulbs E27, 4-pack", 9.99, 1.3, ""),
            ("LED spotlights GU10, 4-pack", 11.99, 0.9, ""),
            ("Adjustable desk lamp", 24.99, 0.5, ""),
            ("Rechargeable torch", 14.99, 0.7, ""),
            ("Plug-in night lights, 2", 7.99, 0.5, ""),
        ],
    ),
    (
        "HH",
        "Storage & Organisation",
        0.6,
        False,
        [
            ("Storage box 45 L", 9.99, 1.2, ""),
            ("Wall-mounted tool rack", 19.99, 0.7, ""),
            ("Shed shelving unit", 34.99, 0.5, ""),
            ("Stacking crates, 3", 14.99, 0.8, ""),
            ("Heavy-duty wall hooks, 6", 8.99, 0.7, ""),
        ],
    ),
    (
        "HH",
        "Kitchen & Home",
        0.7,
        False,
        [
            ("Kitchen knife set, 5 piece", 39.99, 0.5, "A"),
            ("Kitchen compost caddy 5 L", 9.99, 1.1, ""),
            ("Enamel bread bin", 24.99, 0.5, ""),
            ("Fresh herb keeper", 12.99, 0.5, ""),
            ("Chopping board set", 19.99, 0.7, ""),
        ],
    ),
    (
        "HH",
        "Health & Wellbeing",
        0.5,
        True,
        [  # the one sensitive category
            ("Hay-fever relief nasal spray", 7.99, 1.2, ""),
            ("One-a-day antihistamine tablets, 30", 5.99, 1.1, ""),
            ("Knee support brace", 14.99, 0.6, ""),
            ("Wrist support", 9.99, 0.5, ""),
            ("Insect bite relief gel", 4.99, 0.8, ""),
            ("Back support belt", 19.99, 0.4, ""),
        ],
    ),
]
_SENSITIVE_CATEGORY = "Health & Wellbeing"

# SKU codes of our own format: <department code><category number, 2 digits>-<item number, 3 digits>
# e.g. SG04-104. Category numbers follow the order of _CATEGORIES, item numbers start at 101.
_UNKNOWN_SKUS = ("SG04-199", "TW15-188", "OL24-177", "HH32-166", "PC08-155", "WL29-144")


def _sku_code(dept: str, cat_no: int, item_no: int) -> str:
    return f"{dept}{cat_no:02d}-{100 + item_no:03d}"


def _find_sku(name: str) -> str:
    for c, (dept, _cat, _w, _cons, items) in enumerate(_CATEGORIES, start=1):
        for i, item in enumerate(items, start=1):
            if item[0] == name:
                return _sku_code(dept, c, i)
    raise KeyError(name)


KEY_SKUS: dict[str, str] = {
    "propagator": _find_sku("Windowsill propagator, 24-cell"),
    "seed_compost": _find_sku("Seed and cutting compost 40 L"),
    "heated_mat": _find_sku("Heated seedling mat 50 x 25 cm"),
    "pressure_washer": _find_sku("Electric pressure washer 1800 W"),
    "patio_cleaner": _find_sku("Patio cleaner concentrate 5 L"),
    "mini_greenhouse": _find_sku("Mini greenhouse, 4 tier"),
    "frost_fleece": _find_sku("Frost fleece 2 m x 10 m"),
    "weed_burner": _find_sku("Gas weed burner wand"),
    "butane_refill": _find_sku("Butane gas refill cans, 4-pack"),
    "houseplant_feed": _find_sku("Houseplant feed 500 ml"),
    "self_watering_planter": _find_sku("Self-watering planter 30 cm"),
}

# Stock on hand that the scenario relies on; every other SKU gets a fixed pseudo-random level.
_STOCK_OVERRIDES = {
    KEY_SKUS["frost_fleece"]: 1200,  # surplus to clear
    KEY_SKUS["self_watering_planter"]: 480,  # just launched
    KEY_SKUS["heated_mat"]: 140,
    KEY_SKUS["patio_cleaner"]: 260,
    KEY_SKUS["butane_refill"]: 300,
}
_NEW_LAUNCH = date(2026, 9, 28)  # the self-watering planter: launched two days before the data ends

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


# --------------------------------------------------------------------------------------------
# Catalogue arrays
# --------------------------------------------------------------------------------------------


@dataclass(frozen=True)
class _Catalog:
    sku: list[str]
    name: list[str]
    category: list[str]
    department: list[str]
    cat_idx: np.ndarray  # int, per sku
    price_cents: np.ndarray  # int64, per sku
    weight: np.ndarray  # float, per sku, popularity in the general process (0 = never drawn)
    launch: list[date]
    launch_day: np.ndarray  # int, day index of launch relative to PERIOD_START (may be negative)
    age_restricted: np.ndarray  # bool
    sensitive: np.ndarray  # bool
    stock: np.ndarray  # int
    consumable: np.ndarray  # bool, per sku
    cat_names: list[str]
    cat_weight: np.ndarray  # float, per category (0 for target categories)
    cat_fallback: np.ndarray  # int, per category: the sku used when the drawn one is not launched
    cat_lo: np.ndarray  # cumulative weight before the category's first sku
    cat_w: np.ndarray  # total sku weight in the category
    cum: np.ndarray  # cumulative sku weights
    cat_first: np.ndarray  # first sku index per category
    cat_last: np.ndarray  # last sku index per category (inclusive)


_CATALOG: _Catalog | None = None


def _build_catalog() -> _Catalog:
    rng = np.random.default_rng(20250101)  # fixed: the catalogue never depends on the seed
    sku, name, category, department, cat_idx = [], [], [], [], []
    price, weight, launch, age, sens, cons = [], [], [], [], [], []
    cat_names, cat_weight = [], []
    for c, (dept, cat, cw, consumable, items) in enumerate(_CATEGORIES, start=1):
        cat_names.append(cat)
        cat_weight.append(cw)
        for i, (nm, pr, w, flags) in enumerate(items, start=1):
            sku.append(_sku_code(dept, c, i))
            name.append(nm)
            category.append(cat)
            department.append(_DEPARTMENTS[dept])
            cat_idx.append(c - 1)
            price.append(round(pr * 100))
            weight.append(w)
            age.append("A" in flags)
            sens.append(cat == _SENSITIVE_CATEGORY)
            cons.append(consumable)
            if "X" in flags:
                launch.append(_NEW_LAUNCH)
            elif "R" in flags:
                launch.append(date.fromisoformat(flags[flags.index("R") + 1 :][:10]))
            else:
                launch.append(date(2016, 3, 1) + timedelta(days=int(rng.integers(0, 3100))))
    stock = rng.integers(20, 420, len(sku))
    stock[rng.choice(len(sku), 4, replace=False)] = 0  # a few items out of stock
    for s, q in _STOCK_OVERRIDES.items():
        stock[sku.index(s)] = q
    cat_idx_a = np.array(cat_idx)
    weight_a = np.array(weight, dtype=float)
    launch_day = np.array([(d - PERIOD_START).days for d in launch])
    ncat = len(cat_names)
    cat_first = np.array([np.flatnonzero(cat_idx_a == c)[0] for c in range(ncat)])
    cat_last = np.array([np.flatnonzero(cat_idx_a == c)[-1] for c in range(ncat)])
    cum = np.cumsum(weight_a)
    cat_lo = np.where(cat_first > 0, cum[cat_first - 1], 0.0)
    cat_w = cum[cat_last] - cat_lo
    fallback = np.zeros(ncat, dtype=np.int64)
    for c in range(ncat):
        idx = np.arange(cat_first[c], cat_last[c] + 1)
        old = idx[launch_day[idx] <= 0]
        fallback[c] = old[np.argmax(weight_a[old])] if weight_a[old].max() > 0 else old[0]
    return _Catalog(
        sku=sku,
        name=name,
        category=category,
        department=department,
        cat_idx=cat_idx_a,
        price_cents=np.array(price, dtype=np.int64),
        weight=weight_a,
        launch=launch,
        launch_day=launch_day,
        age_restricted=np.array(age),
        sensitive=np.array(sens),
        stock=stock.astype(np.int64),
        consumable=np.array(cons),
        cat_names=cat_names,
        cat_weight=np.array(cat_weight, dtype=float),
        cat_fallback=fallback,
        cat_lo=cat_lo,
        cat_w=cat_w,
        cum=cum,
        cat_first=cat_first,
        cat_last=cat_last,
    )


def _catalog() -> _Catalog:
    global _CATALOG
    if _CATALOG is None:
        _CATALOG = _build_catalog()
    return _CATALOG


def catalog() -> pa.Table:
    """The products table of the sample (fixed, whatever the seed), as an arrow table."""
    cat = _catalog()
    return pa.table(
        {
            "sku": pa.array(cat.sku, pa.string()),
            "name": pa.array(cat.name, pa.string()),
            "category": pa.array(cat.category, pa.string()),
            "department": pa.array(cat.department, pa.string()),
            "age_restricted": pa.array(cat.age_restricted, pa.bool_()),
            "sensitive": pa.array(cat.sensitive, pa.bool_()),
            "launch_date": pa.array(cat.launch, pa.date32()),
            "stock_on_hand": pa.array(cat.stock, pa.int32()),
        }
    )


# --------------------------------------------------------------------------------------------
# Generation
# --------------------------------------------------------------------------------------------

_REGIONS = (
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
_REASONS = ("unsubscribed", "hard_bounce", "complaint", "customer_request", "deceased")
_REASON_P = np.array([0.55, 0.2, 0.07, 0.15, 0.03])
_DOMAINS = ("example.com", "example.net", "example.org")

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


def _day_cdf() -> np.ndarray:
    d = np.arange(_DAYS)
    doy = np.array([(PERIOD_START + timedelta(days=int(x))).timetuple().tm_yday for x in d])
    w = 1.0 + 0.55 * np.cos(2 * np.pi * (doy - 125) / 365.25)  # spring peak, autumn trough
    w = w * np.where((d + PERIOD_START.weekday()) % 7 >= 5, 1.25, 1.0)  # busier weekends
    c = np.cumsum(w)
    return np.asarray(c / c[-1])


@dataclass
class _Chunk:
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


def _rule_masks(cat: _Catalog) -> tuple[np.ndarray, np.ndarray]:
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
    cat: _Catalog,
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
    cat: _Catalog,
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
    key = l_order * (nsku + len(_UNKNOWN_SKUS)) + l_sku
    _, first = np.unique(key, return_index=True)
    return np.sort(first)


def _gen_chunk(seed: int, k: int, n: int, cat: _Catalog, day_cdf: np.ndarray) -> _Chunk:
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
    domain = rng.integers(0, len(_DOMAINS), n)
    consent = rng.random(n) < _CONSENT
    first_consent = (date(2022, 3, 1) - PERIOD_START).days
    consent_day = rng.integers(first_consent, _DAYS, n)
    withdrawn = (~consent) & (rng.random(n) < _WITHDRAWN)
    consent_day = np.where(consent | withdrawn, consent_day, -(10**9))
    age_known = rng.random(n) >= _AGE_UNKNOWN
    minor = age_known & (rng.random(n) < _MINOR)
    age_years = np.where(minor, rng.uniform(16.0, 17.99, n), 18.0 + 70.0 * rng.beta(2.2, 2.6, n))
    birth_day = (_DAYS - 1) - np.floor(age_years * 365.25).astype(np.int64)
    region = rng.choice(len(_REGIONS), n, p=_REGION_P)
    supp = np.flatnonzero(rng.random(n) < _SUPPRESSED)
    twice = supp[rng.random(len(supp)) < _SUPPRESSED_TWICE / _SUPPRESSED]
    supp_cust = np.concatenate([supp, twice])
    supp_reason = rng.choice(len(_REASONS), len(supp_cust), p=_REASON_P)
    first_supp = (date(2023, 6, 1) - PERIOD_START).days
    supp_day = rng.integers(first_supp, _DAYS, len(supp_cust))

    # ---- general orders --------------------------------------------------------------------
    n_orders = rng.poisson(0.5 + 7.0 * breadth)
    o_cust = np.repeat(np.arange(n), n_orders)
    n_general = len(o_cust)
    o_day = np.searchsorted(day_cdf, rng.random(n_general), side="right").clip(0, _DAYS - 1)
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
        lam1 = -math.log(1.0 - r["hazard_30d"]) / _MONTH
        lam0 = -math.log(1.0 - r["base_hazard_30d"]) / _MONTH * breadth
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
            ok = t < _T_END
            a, t, by_base, after, start = active[ok], t[ok], by_base[ok], after[ok], start[ok]
            online = rng.random(a.size) < online_share[a]
            # never before the return it follows, nor before the antecedent that caused it
            t = np.maximum(_shop_time(t, online), np.where(by_base, start, after) + 60)
            ok = t < _T_END
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
            ret = (rng.random(a.size) < _RETURN_RATE) & (tr < _T_END)
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
    inside = (r_time < _T_END) & (full | (q >= 2))
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
    l_sku[unknown] = nsku + rng.integers(0, len(_UNKNOWN_SKUS), len(unknown))
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

    return _Chunk(
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
# Assembly and writing
# --------------------------------------------------------------------------------------------

_CUSTOMER_ID0 = 1_000_001
_ORDER_ID0 = 50_000_001


@dataclass(frozen=True)
class SampleSummary:
    """What build_sample wrote."""

    path: str
    seed: int
    customers: int
    products: int
    orders: int
    order_lines: int
    suppressions: int
    first_order_at: datetime
    last_order_at: datetime
    build_seconds: float
    file_bytes: int
    quirks: dict[str, int]


def _dates(day_index: np.ndarray, valid: np.ndarray | None = None) -> pa.Array:
    days = (day_index + (PERIOD_START - date(1970, 1, 1)).days).astype(np.int32)
    mask = None if valid is None else ~valid
    return pa.array(days, type=pa.int32(), mask=mask).cast(pa.date32())


def _timestamps(seconds: np.ndarray, valid: np.ndarray | None = None) -> pa.Array:
    epoch = int((_EPOCH - datetime(1970, 1, 1)).total_seconds())
    s = np.nan_to_num(seconds, nan=0).astype(np.int64) + epoch
    mask = None if valid is None else ~valid
    return pa.array(s, type=pa.int64(), mask=mask).cast(pa.timestamp("s"))


def _dict(indices: np.ndarray, values: tuple[str, ...] | list[str]) -> pa.Array:
    return pa.DictionaryArray.from_arrays(
        pa.array(indices.astype(np.int32)), pa.array(list(values), pa.string())
    )


def _assemble(chunks: list[_Chunk], cat: _Catalog) -> dict[str, pa.Table]:
    cust_off = np.cumsum([0] + [c.n for c in chunks])
    ord_off = np.cumsum([0] + [len(c.o_cust) for c in chunks])

    # customers
    cid = _CUSTOMER_ID0 + np.arange(cust_off[-1], dtype=np.int64)
    has_email = np.concatenate([c.has_email for c in chunks])
    domain = np.concatenate([c.domain for c in chunks])
    emails = [
        f"shopper{i}@{_DOMAINS[d]}" if h else None
        for i, d, h in zip(cid.tolist(), domain.tolist(), has_email.tolist(), strict=False)
    ]
    consent_day = np.concatenate([c.consent_day for c in chunks])
    age_known = np.concatenate([c.age_known for c in chunks])
    customers = pa.table(
        {
            "customer_id": pa.array(cid),
            "email": pa.array(emails, pa.string()),
            "marketing_consent": pa.array(np.concatenate([c.consent for c in chunks])),
            "consent_date": _dates(
                np.where(consent_day > -(10**8), consent_day, 0), consent_day > -(10**8)
            ),
            "birth_date": _dates(np.concatenate([c.birth_day for c in chunks]), age_known),
            "region": _dict(np.concatenate([c.region for c in chunks]), _REGIONS),
        }
    )
    truth = pa.table(
        {
            "customer_id": pa.array(cid),
            "breadth": pa.array(np.concatenate([c.breadth for c in chunks])),
            "favoured_categories": pa.array(
                np.concatenate([c.nfav for c in chunks]).astype(np.int32)
            ),
            "online_share": pa.array(np.concatenate([c.online_share for c in chunks])),
            "general_orders": pa.array(
                np.concatenate([c.n_general_orders for c in chunks]).astype(np.int32)
            ),
        }
    )
    suppressions = pa.table(
        {
            "customer_id": pa.array(
                np.concatenate(
                    [cid[o + c.supp_cust] for c, o in zip(chunks, cust_off, strict=False)]
                )
            ),
            "reason": _dict(np.concatenate([c.supp_reason for c in chunks]), _REASONS),
            "suppressed_at": _dates(np.concatenate([c.supp_day for c in chunks])),
        }
    )

    # orders: ids increase with time (ties broken by customer)
    o_cust = np.concatenate([c.o_cust + o for c, o in zip(chunks, cust_off, strict=False)])
    o_t = np.concatenate([c.o_t for c in chunks])
    o_online = np.concatenate([c.o_online for c in chunks])
    rank_order = np.lexsort((o_cust, o_t))
    order_id = np.empty(len(o_t), dtype=np.int64)
    order_id[rank_order] = _ORDER_ID0 + np.arange(len(o_t))
    orders = pa.table(
        {
            "order_id": pa.array(order_id[rank_order]),
            "customer_id": pa.array(cid[o_cust[rank_order]]),
            "ordered_at": _timestamps(o_t[rank_order]),
            "channel": _dict(o_online[rank_order].astype(np.int8), ("store", "online")),
        }
    )
    del rank_order

    # lines, sorted by order id (stable: lines keep their order inside an order)
    l_oid = np.concatenate([order_id[c.l_order + o] for c, o in zip(chunks, ord_off, strict=False)])
    l_sku = np.concatenate([c.l_sku for c in chunks])
    l_qty = np.concatenate([c.l_qty for c in chunks])
    l_cents = np.concatenate([c.l_cents for c in chunks])
    s = np.argsort(l_oid, kind="stable")
    order_lines = pa.table(
        {
            "order_id": pa.array(l_oid[s]),
            "sku": _dict(l_sku[s], list(cat.sku) + list(_UNKNOWN_SKUS)),
            "quantity": pa.array(l_qty[s].astype(np.int32)),
            "cents": pa.array(l_cents[s]),
        }
    )
    del s, l_oid, l_sku, l_qty, l_cents

    # planted ground truth
    parts = []
    schema = pa.schema(
        [
            ("rule_id", pa.string()),
            ("customer_id", pa.int64()),
            ("antecedent_held_at", pa.timestamp("s")),
            ("target_bought_at", pa.timestamp("s")),
            ("target_sku", pa.string()),
            ("source", pa.string()),
            ("target_purchases", pa.int32()),
            ("target_full_returns", pa.int32()),
        ]
    )
    for ri, r in enumerate(PLANTED_RULES):
        cols = [np.concatenate([c.planted[ri][j] for c in chunks]) for j in range(7)]
        who = np.concatenate([c.planted[ri][0] + o for c, o in zip(chunks, cust_off, strict=False)])
        _, hold, tgt, src, tsku, n_pur, n_ret = cols
        parts.append(
            pa.table(
                {
                    "rule_id": pa.array([r["rule_id"]] * len(who), pa.string()),
                    "customer_id": pa.array(cid[who]),
                    "antecedent_held_at": _timestamps(hold, ~np.isnan(hold)),
                    "target_bought_at": _timestamps(tgt, ~np.isnan(tgt)),
                    "target_sku": pa.DictionaryArray.from_arrays(
                        pa.array(np.maximum(tsku, 0).astype(np.int32), mask=tsku < 0),
                        pa.array(list(cat.sku), pa.string()),
                    ).cast(pa.string()),
                    "source": _dict(src, ("none", "base", "rule")).cast(pa.string()),
                    "target_purchases": pa.array(n_pur, pa.int32()),
                    "target_full_returns": pa.array(n_ret, pa.int32()),
                },
                schema=schema,
            )
        )
    planted = pa.concat_tables(parts)

    rules = pa.table(
        {
            "rule_id": [r["rule_id"] for r in PLANTED_RULES],
            "antecedent_level": [r["antecedent_level"] for r in PLANTED_RULES],
            "antecedent": [list(r["antecedent"]) for r in PLANTED_RULES],
            "target_level": [r["target_level"] for r in PLANTED_RULES],
            "target": [r["target"] for r in PLANTED_RULES],
            "hazard_30d": [float(r["hazard_30d"]) for r in PLANTED_RULES],
            "base_hazard_30d": [float(r["base_hazard_30d"]) for r in PLANTED_RULES],
            "purpose": [r["purpose"] for r in PLANTED_RULES],
            "description": [r["description"] for r in PLANTED_RULES],
        }
    )
    return {
        "customers": customers,
        "orders": orders,
        "order_lines": order_lines,
        "suppressions": suppressions,
        "sample_customer_truth": truth,
        "sample_planted": planted,
        "sample_rules": rules,
    }


_DDL = """
CREATE TABLE customers (
    customer_id BIGINT NOT NULL, email VARCHAR, marketing_consent BOOLEAN NOT NULL,
    consent_date DATE, birth_date DATE, region VARCHAR NOT NULL);
CREATE TABLE products (
    sku VARCHAR NOT NULL, name VARCHAR NOT NULL, category VARCHAR NOT NULL,
    department VARCHAR NOT NULL, age_restricted BOOLEAN NOT NULL, sensitive BOOLEAN NOT NULL,
    launch_date DATE NOT NULL, stock_on_hand INTEGER NOT NULL);
CREATE TABLE orders (
    order_id BIGINT NOT NULL, customer_id BIGINT NOT NULL, ordered_at TIMESTAMP NOT NULL,
    channel VARCHAR NOT NULL);
CREATE TABLE order_lines (
    order_id BIGINT NOT NULL, sku VARCHAR NOT NULL, quantity INTEGER NOT NULL,
    net_amount DECIMAL(12,2) NOT NULL);
CREATE TABLE suppressions (
    customer_id BIGINT NOT NULL, reason VARCHAR NOT NULL, suppressed_at DATE NOT NULL);
CREATE TABLE sample_meta (key VARCHAR NOT NULL, value VARCHAR NOT NULL);
CREATE TABLE sample_rules (
    rule_id VARCHAR NOT NULL, antecedent_level VARCHAR NOT NULL, antecedent VARCHAR[] NOT NULL,
    target_level VARCHAR NOT NULL, target VARCHAR NOT NULL, hazard_30d DOUBLE NOT NULL,
    base_hazard_30d DOUBLE NOT NULL, purpose VARCHAR NOT NULL, description VARCHAR NOT NULL);
CREATE TABLE sample_customer_truth (
    customer_id BIGINT NOT NULL, breadth DOUBLE NOT NULL, favoured_categories INTEGER NOT NULL,
    online_share DOUBLE NOT NULL, general_orders INTEGER NOT NULL);
CREATE TABLE sample_planted (
    rule_id VARCHAR NOT NULL, customer_id BIGINT NOT NULL, antecedent_held_at TIMESTAMP,
    target_bought_at TIMESTAMP, target_sku VARCHAR, source VARCHAR NOT NULL,
    target_purchases INTEGER NOT NULL, target_full_returns INTEGER NOT NULL);
"""

_INSERT = {
    "customers": "SELECT customer_id, email, marketing_consent, consent_date, birth_date, "
    "CAST(region AS VARCHAR) FROM src",
    "products": "SELECT * FROM src",
    "orders": "SELECT order_id, customer_id, CAST(ordered_at AS TIMESTAMP), "
    "CAST(channel AS VARCHAR) FROM src",
    "order_lines": "SELECT order_id, CAST(sku AS VARCHAR), quantity, "
    "CAST(cents AS DECIMAL(18,0)) / 100 FROM src",
    "suppressions": "SELECT customer_id, CAST(reason AS VARCHAR), suppressed_at FROM src",
    "sample_rules": "SELECT * FROM src",
    "sample_customer_truth": "SELECT * FROM src",
    "sample_planted": "SELECT rule_id, customer_id, CAST(antecedent_held_at AS TIMESTAMP), "
    "CAST(target_bought_at AS TIMESTAMP), target_sku, source, "
    "target_purchases, target_full_returns FROM src",
    "sample_meta": "SELECT * FROM src",
}


def _write(tmp: Path, tables: dict[str, pa.Table]) -> None:
    from reachlist.warehouse import Warehouse

    with Warehouse.open(tmp, create=True) as wh:
        wh.run_statement(_DDL)
        for name, sql in _INSERT.items():
            wh.insert_arrow(name, tables[name], sql)
        wh.run_statement("CHECKPOINT")


def build_sample(
    path: str | os.PathLike[str],
    customers: int = 20_000,
    seed: int = 7,
    *,
    overwrite: bool = False,
) -> SampleSummary:
    """Generate the sample warehouse into a DuckDB file at ``path`` and return a summary.

    Deterministic: the same (customers, seed) always gives identical tables. The file is written
    to a temporary file in the same directory and moved into place, so ``path`` never holds a
    half-written warehouse. An existing file is refused (StateError) unless ``overwrite=True``.
    """
    started = time.perf_counter()
    if isinstance(customers, bool) or not isinstance(customers, int | np.integer):
        raise InputError(
            f"expected a whole number of customers, found {customers!r}.",
            hint=f"pass an integer of at least {MIN_CUSTOMERS}.",
        )
    if customers < MIN_CUSTOMERS:
        raise InputError(
            f"expected at least {MIN_CUSTOMERS} customers, found {customers}.",
            hint=f"pass customers >= {MIN_CUSTOMERS} (the default is 20,000).",
        )
    if isinstance(seed, bool) or not isinstance(seed, int | np.integer) or seed < 0:
        raise InputError(
            f"expected a non-negative integer seed, found {seed!r}.",
            hint="pass a seed such as 7 (the default).",
        )
    target = Path(path)
    if target.is_dir():
        raise StateError(
            f"expected a file path for the sample warehouse, found a directory at {target}.",
            hint="give a file name such as sample.duckdb.",
        )
    if target.exists() and not overwrite:
        raise StateError(
            f"expected no file at {target}, found an existing file.",
            hint="pass overwrite=True (CLI: --overwrite) to replace it, or choose another path.",
        )
    if not target.parent.is_dir():
        raise InputError(
            f"expected an existing directory for {target}, found none at {target.parent}.",
            hint="create the directory first.",
        )

    cat = _catalog()
    day_cdf = _day_cdf()
    chunks = []
    for k, start in enumerate(range(0, customers, _CHUNK)):
        chunks.append(_gen_chunk(int(seed), k, min(_CHUNK, customers - start), cat, day_cdf))
    tables = _assemble(chunks, cat)
    quirks: dict[str, int] = {}
    for c in chunks:
        for key, v in c.quirks.items():
            quirks[key] = quirks.get(key, 0) + int(v)
    del chunks
    cust = tables["customers"]
    quirks["customers_without_consent"] = cust.num_rows - int(
        pc.sum(cust["marketing_consent"]).as_py()
    )
    quirks["customers_age_unknown"] = cust["birth_date"].null_count
    quirks["customers_without_email"] = cust["email"].null_count
    quirks["suppression_rows"] = tables["suppressions"].num_rows
    tables["products"] = catalog()

    ts = tables["orders"]["ordered_at"]
    first = pc.min(ts).as_py()
    last = pc.max(ts).as_py()
    meta = {
        "generator": "reachlist.sample",
        "generator_version": GENERATOR_VERSION,
        "seed": str(seed),
        "customers": str(customers),
        "period_start": PERIOD_START.isoformat(),
        "period_end": PERIOD_END.isoformat(),
        **{f"quirk.{k}": str(v) for k, v in quirks.items()},
    }
    tables["sample_meta"] = pa.table({"key": list(meta), "value": list(meta.values())})

    tmp = target.with_name(f".{target.name}.tmp-{os.getpid()}")
    for leftover in (tmp, Path(f"{tmp}.wal")):
        leftover.unlink(missing_ok=True)
    try:
        _write(tmp, tables)
        # a WAL left next to an earlier file at this path would be replayed into the new one
        Path(f"{target}.wal").unlink(missing_ok=True)
        os.replace(tmp, target)
    finally:
        for leftover in (tmp, Path(f"{tmp}.wal")):
            leftover.unlink(missing_ok=True)

    return SampleSummary(
        path=str(target),
        seed=int(seed),
        customers=customers,
        products=tables["products"].num_rows,
        orders=tables["orders"].num_rows,
        order_lines=tables["order_lines"].num_rows,
        suppressions=tables["suppressions"].num_rows,
        first_order_at=first,
        last_order_at=last,
        build_seconds=round(time.perf_counter() - started, 3),
        file_bytes=target.stat().st_size,
        quirks=quirks,
    )
