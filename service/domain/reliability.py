"""Failures, interruptions and checkpoints (model.md §4)."""

import numpy as np

from service.domain.arrays import ArrayLike, Floats, as_floats
from service.domain.units import SECONDS_PER_HOUR, gbps_to_bytes_per_second


def job_mtbi_seconds(
    *, nodes: ArrayLike, node_mtbf_hours: ArrayLike, interruption_mean_hours: ArrayLike
) -> Floats:
    """Mean time between interruptions of a job: 1/M = nodes × (1/node MTBF + 1/interrupt mean).

    Either mean may be inf (not modelled); M is inf when neither applies.
    """
    rate_per_node_hour = 1.0 / as_floats(node_mtbf_hours) + 1.0 / as_floats(interruption_mean_hours)
    job_rate = as_floats(nodes) * rate_per_node_hour
    with np.errstate(divide="ignore"):
        return np.asarray(SECONDS_PER_HOUR / job_rate)


def checkpoint_write_seconds(
    *, checkpoint_bytes: ArrayLike, nodes: ArrayLike, write_gbps_per_node: ArrayLike,
    storage_write_gbps: ArrayLike = np.inf,
) -> Floats:
    """δ = checkpoint bytes / min(nodes × per-node write bandwidth, the storage system's write
    bandwidth): every node writes its shard, but no faster than the storage they share takes it."""
    bandwidth = np.minimum(as_floats(nodes) * as_floats(write_gbps_per_node), as_floats(storage_write_gbps))
    return np.asarray(as_floats(checkpoint_bytes) / gbps_to_bytes_per_second(bandwidth))


def young_interval(*, checkpoint_seconds: ArrayLike, mtbi_seconds: ArrayLike) -> Floats:
    """First-order optimal checkpoint interval τ = √(2·δ·M) (Young 1974, CACM 17(9))."""
    return np.sqrt(2.0 * as_floats(checkpoint_seconds) * as_floats(mtbi_seconds))


def daly_interval(*, checkpoint_seconds: ArrayLike, mtbi_seconds: ArrayLike) -> Floats:
    """Higher-order optimal checkpoint interval (Daly 2006, "A higher order estimate of the optimum
    checkpoint interval for restart dumps", FGCS 22(3):303-312).

    τ = √(2δM)·[1 + ⅓·√(δ/2M) + (1/9)·(δ/2M)] − δ for δ < 2M, else τ = M. M may be inf
    (no interruptions), and then τ is inf too.
    """
    delta = as_floats(checkpoint_seconds)
    mtbi = as_floats(mtbi_seconds)
    ratio = np.where(np.isfinite(mtbi), delta / (2.0 * np.where(np.isfinite(mtbi), mtbi, 1.0)), 0.0)
    with np.errstate(invalid="ignore"):
        series = np.sqrt(2.0 * delta * mtbi) * (1.0 + np.sqrt(ratio) / 3.0 + ratio / 9.0) - delta
    return np.where(delta < 2.0 * mtbi, series, mtbi)


def expected_wall_fraction(
    *,
    interval_seconds: ArrayLike,
    checkpoint_seconds: ArrayLike,
    restart_seconds: ArrayLike,
    mtbi_seconds: ArrayLike,
) -> Floats:
    """Expected wall time over solve time with checkpoints and restarts.

    T_w / T_s = M·e^{R/M}·(e^{(τ+δ)/M} − 1) / τ: the expected time for exponentially distributed
    interruptions when a restart can itself be interrupted (the model of Daly 2006, FGCS 22(3);
    derived, and checked by simulation in the tests). With M = inf there are no interruptions and
    no checkpoints are needed: 1. A checkpoint that costs nothing (δ = 0, so Daly's τ = 0: nothing to
    save, as for work given without a parameter count or a checkpoint size) takes the formula's limit
    as τ → 0, e^{R/M}: only the restarts cost time.
    """
    mtbi = as_floats(mtbi_seconds)
    finite = np.isfinite(mtbi)
    safe_mtbi = np.where(finite, mtbi, 1.0)
    tau = np.where(finite, as_floats(interval_seconds), 1.0)
    delta = as_floats(checkpoint_seconds)
    with np.errstate(over="ignore", divide="ignore", invalid="ignore"):
        restarts = np.exp(as_floats(restart_seconds) / safe_mtbi)
        fraction = safe_mtbi * restarts * np.expm1((tau + delta) / safe_mtbi) / tau
    if not np.all(tau):  # rare: only where there is nothing to save
        fraction = np.where((tau == 0.0) & (delta == 0.0), restarts, fraction)
    return np.where(finite, fraction, 1.0)
