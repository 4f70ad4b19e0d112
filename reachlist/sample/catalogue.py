"""The sample's invented catalogue: departments, categories, SKUs, prices, stock."""

from __future__ import annotations

from dataclasses import dataclass
from datetime import date, timedelta

import numpy as np
import pyarrow as pa

from reachlist.sample.period import PERIOD_START

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
UNKNOWN_SKUS = ("SG04-199", "TW15-188", "OL24-177", "HH32-166", "PC08-155", "WL29-144")


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
# Catalogue arrays
# --------------------------------------------------------------------------------------------


@dataclass(frozen=True)
class Catalogue:
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


_CATALOG: Catalogue | None = None


def _build_catalog() -> Catalogue:
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
    return Catalogue(
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


def cached_catalogue() -> Catalogue:
    global _CATALOG
    if _CATALOG is None:
        _CATALOG = _build_catalog()
    return _CATALOG


def catalog() -> pa.Table:
    """The products table of the sample (fixed, whatever the seed), as an arrow table."""
    cat = cached_catalogue()
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
