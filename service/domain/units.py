"""Unit conversions used by the core. SI inside; the trade's units only at the edge (model.md §0)."""

from service.domain.arrays import ArrayLike, Floats, as_floats

HOURS_PER_YEAR = 8760.0
MONTHS_PER_YEAR = 12.0
HOURS_PER_MONTH = HOURS_PER_YEAR / MONTHS_PER_YEAR  # 730 h: the trade's planning month
SECONDS_PER_HOUR = 3600.0
SECONDS_PER_DAY = 86400.0

BITS_PER_BYTE = 8.0
GIGA = 1e9

TB = 1e12  # decimal terabyte, as storage and transfer are priced
GIB = 2.0**30  # binary gigabyte, as accelerator memory is sold

# 1 ton of refrigeration = 12,000 Btu_IT/h = 3.516853 kW (NIST SP 811, App. B.8).
KW_PER_TON_OF_REFRIGERATION = 3.516853
# 1 kW = 3,412.14 Btu_IT/h (NIST SP 811, App. B.8).
BTU_PER_HOUR_PER_KW = 3412.14


def gbps_to_bytes_per_second(gbps: ArrayLike) -> Floats:
    """Convert a link speed in Gb/s (1e9 bits per second) to bytes per second."""
    return as_floats(gbps) * (GIGA / BITS_PER_BYTE)


def bytes_per_second_to_gbps(bytes_per_second: ArrayLike) -> Floats:
    """Convert bytes per second to the trade's Gb/s."""
    return as_floats(bytes_per_second) * (BITS_PER_BYTE / GIGA)
