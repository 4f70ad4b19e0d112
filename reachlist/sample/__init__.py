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

from reachlist.sample.build import SampleSummary, build_sample
from reachlist.sample.catalogue import KEY_SKUS, catalog
from reachlist.sample.period import GENERATOR_VERSION, PERIOD_END, PERIOD_START
from reachlist.sample.planted import PLANTED_RULES, planted_rules

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
