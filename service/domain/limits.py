"""Plausibility ceilings on inputs (common practice: each sits orders of magnitude beyond any real
campaign or catalog, so a true figure is never refused, while a typo or an attack cannot push the
model into overflow, unbounded memory or unprintable figures).

Requests and catalogs are refused above these (422 naming the field), and sweeps vary their inputs
within the same ranges, so whatever is accepted once is accepted in a sweep too."""

MAX_COUNT = 1_000_000_000  # any whole number of things (layers, runs, checkpoints, accelerators)
MAX_QUANTITY = 1e30  # any physical quantity (parameters, tokens, FLOPs are below 1e27 in practice)
MAX_AMOUNT = 1e12  # any single price or amount in a catalog's currency (minor currencies included)
MAX_FACTOR = 1_000.0  # a multiplier of catalog prices
MAX_NODES = 1_000_000  # nodes in one site or offer
MAX_MONTHS = 1_200  # depreciation, committed terms, recurrence: a century
MAX_HOURS = 1e9  # mean times between failures or interruptions
MAX_GBPS = 1e6  # any link speed
MAX_KW = 1e7  # any power or cooling capacity (a node's peak power is far below)
MAX_TB = 1e9  # datasets, checkpoints, egress
MAX_DAYS = 36_525.0  # a deadline: a century
MAX_KGCO2E_PER_KWH = 10.0  # grid carbon intensity (the dirtiest grids are near 1)
MAX_ITEMS = 1_000  # entries in one catalog list (accelerators, node types, sites, offers)
MAX_RUNS = 1_000_000  # runs of one campaign, checkpoints kept
MAX_EXTRA_WORK = 1_000.0  # exploration or evaluation work, as a fraction of the main run
