"""reachlist: from order history to targeted-offer customer lists.

The library is usable without the CLI (the README's "Use it from Python" runs this in the tests)::

    from reachlist import Warehouse, mine_rules, ListRequest, plan_list, preview_list
    with Warehouse.open("garden.duckdb", read_only=True) as wh:
        rules = mine_rules(wh, "SG04-104")
        outcome = preview_list(wh, plan_list(wh, ListRequest("SG04-104", campaign_id="c1")))

Names are imported when first used, so ``import reachlist`` stays cheap (the CLI's ``--version``
and ``--help`` never load the numeric stack).
"""

from __future__ import annotations

import importlib
from typing import TYPE_CHECKING, Any

from reachlist.errors import (
    ContractError,
    EmptyResultError,
    InputError,
    ReachlistError,
    StateError,
    WarehouseError,
)

__version__ = "0.1.0"

_LAZY: dict[str, str] = {
    # opening a warehouse
    "Warehouse": "reachlist.warehouse",
    "Mapping": "reachlist.schema",
    "check_warehouse": "reachlist.check",
    "build_sample": "reachlist.sample",
    # finding targets and mining rules
    "find_items": "reachlist.catalog",
    "mine_rules": "reachlist.rules",
    "RuleSet": "reachlist.rules",
    # lists: plan, preview, build
    "ListRequest": "reachlist.planning",
    "plan_list": "reachlist.planning",
    "preview_list": "reachlist.lists",
    "build_list": "reachlist.lists",
    "CampaignLog": "reachlist.campaigns",
    "list_campaigns": "reachlist.campaign_list",
    "brief_data": "reachlist.brief",
    # estimates and results
    "estimate_takeup": "reachlist.estimate",
    "calibrate_audience": "reachlist.estimate",
    "backtest": "reachlist.backtest",
    "campaign_results": "reachlist.results",
}

__all__ = [
    "CampaignLog",
    "ContractError",
    "EmptyResultError",
    "InputError",
    "ListRequest",
    "Mapping",
    "ReachlistError",
    "RuleSet",
    "StateError",
    "Warehouse",
    "WarehouseError",
    "__version__",
    "backtest",
    "brief_data",
    "build_list",
    "build_sample",
    "calibrate_audience",
    "campaign_results",
    "check_warehouse",
    "estimate_takeup",
    "find_items",
    "list_campaigns",
    "mine_rules",
    "plan_list",
    "preview_list",
]


def __getattr__(name: str) -> Any:
    if name in _LAZY:
        value = getattr(importlib.import_module(_LAZY[name]), name)
        globals()[name] = value
        return value
    raise AttributeError(f"module 'reachlist' has no attribute {name!r}")


def __dir__() -> list[str]:
    return sorted(__all__)


if TYPE_CHECKING:
    from reachlist.backtest import backtest
    from reachlist.brief import brief_data
    from reachlist.campaign_list import list_campaigns
    from reachlist.campaigns import CampaignLog
    from reachlist.catalog import find_items
    from reachlist.check import check_warehouse
    from reachlist.estimate import calibrate_audience, estimate_takeup
    from reachlist.lists import build_list, preview_list
    from reachlist.planning import ListRequest, plan_list
    from reachlist.results import campaign_results
    from reachlist.rules import RuleSet, mine_rules
    from reachlist.sample import build_sample
    from reachlist.schema import Mapping
    from reachlist.warehouse import Warehouse
