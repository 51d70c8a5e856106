"""Data gravity: what it costs, in money and time, to bring the dataset to a venue (model.md §9).

The dataset lives at `data.home` (a venue id). Training elsewhere pays egress at home, ingress at
the destination, and waits for the copy: dataset / the slower of the two links. Where the home is
not given, a rented venue still charges its own ingress fee, and no staging time is counted.
"""

from dataclasses import dataclass

from service.domain.arrays import ArrayLike, Floats, as_floats
from service.domain.assumptions import default
from service.domain.catalog import Offer, Site
from service.domain.units import TB, gbps_to_bytes_per_second


@dataclass(frozen=True)
class Transfer:
    """How the dataset reaches one venue."""

    ingress_per_gb: float
    egress_at_home_per_gb: float
    link_gbps: float | None  # the slower link of the copy; None when nothing moves
    moves: bool
    link_assumed: bool = False  # neither end states its link: the default was used
    home: str | None = None


def _ingress_fee(venue: Site | Offer) -> float:
    return venue.ingress_per_gb if isinstance(venue, Offer) else 0.0


def _link(venue: Site | Offer) -> float | None:
    return venue.ingress_gbps if isinstance(venue, Offer) else venue.wan_gbps


def transfer(venue: Site | Offer, home: Site | Offer | None) -> Transfer:
    """The fees and link of copying the dataset from its home to `venue`."""
    if home is None:
        return Transfer(_ingress_fee(venue), 0.0, None, False)
    if venue.id == home.id:
        return Transfer(0.0, 0.0, None, False, home=home.id)
    links = [g for g in (_link(venue), _link(home)) if g is not None]
    link = min(links) if links else default("data_link_gbps")
    return Transfer(_ingress_fee(venue), home.egress_per_gb, link, True, link_assumed=not links, home=home.id)


def staging_seconds(*, dataset_tb: ArrayLike, link: Transfer) -> Floats:
    """Time to copy the dataset before training starts: bytes / link speed (0 when it stays)."""
    if not link.moves or link.link_gbps is None:
        return as_floats(dataset_tb) * 0.0
    return as_floats(dataset_tb) * TB / gbps_to_bytes_per_second(link.link_gbps)
