"""Why an option is ruled out: one bit per screen, combined in an integer array per scenario."""

PRECISION = 1  # the accelerator has no peak figure for the requested precision
MEMORY = 2  # the model cannot fit at any accelerator count
CAPACITY = 4  # the memory minimum needs more nodes than the venue can give
POWER = 8  # the site cannot feed the nodes (facility power)
COOLING = 16  # the site cannot remove their heat
DEADLINE = 32  # the fastest layout within the limit misses the deadline
RESIDENCY = 64  # the venue's jurisdiction is outside the allowed set
OWNED_ONLY = 128  # the request allows owned sites only
PINNED_TOO_FEW = 256  # the pinned accelerator count cannot hold the model

ORDER = (RESIDENCY, OWNED_ONLY, PRECISION, MEMORY, PINNED_TOO_FEW, CAPACITY, POWER, COOLING, DEADLINE)


def names(mask: int) -> list[int]:
    """The screens set in one scenario's mask, in the order people should read them."""
    return [bit for bit in ORDER if mask & bit]
