"""reachlist: from order history to targeted-offer customer lists.

The library is usable without the CLI::

    from reachlist import Warehouse, mine_rules
    with Warehouse.open("garden.duckdb") as wh:
        rules = mine_rules(wh, "SG04-104").frame
"""

from reachlist.errors import (
    ContractError,
    EmptyResultError,
    InputError,
    ReachlistError,
    StateError,
    WarehouseError,
)
from reachlist.schema import Mapping
from reachlist.warehouse import Warehouse

__version__ = "0.1.0"

__all__ = [
    "ContractError",
    "EmptyResultError",
    "InputError",
    "Mapping",
    "ReachlistError",
    "StateError",
    "Warehouse",
    "WarehouseError",
    "__version__",
]
