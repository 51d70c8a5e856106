"""Loads and hardware for tests of the layout search, with every field not under test at a
plain default. Demo figures only; no published check value."""

from typing import Any

import numpy as np

from service.domain.campaign import LayoutPins
from service.domain.layout import Architecture, Hardware, LayoutGrid, Load, evaluate_layouts


def load(**changes: Any) -> Load:
    """A campaign's load: 1.3e9 parameters on 3e10 tokens, no architecture, no deadline."""
    parameters = np.asarray(changes.pop("parameters", 1.3e9), dtype=np.float64)
    tokens = np.asarray(changes.pop("tokens", 3e10), dtype=np.float64)
    fields: dict[str, Any] = dict(
        timed_flops_per_run=6.0 * parameters * tokens, timed_flops_per_token=6.0 * parameters,
        runs_multiplier=np.ones(1), parameters=parameters, tokens_per_run=tokens,
        global_batch_tokens=np.full(1, 4e6), architecture=None, micro_batch=1.0, checkpoint_bytes=None,
        recompute="none", parallelism="auto", pins=LayoutPins(), deadline_seconds=np.full(1, np.inf),
        restart_seconds=600.0,
    )
    fields.update(changes)
    return Load(**fields)


def hardware(**changes: Any) -> Hardware:
    """A node of 8 accelerators of 80 GiB at 50 TFLOP/s sustained, an RDMA link of 400 Gb/s."""
    fields: dict[str, Any] = dict(
        accelerators_per_node=8, memory_bytes=80 * 2.0**30, sustained_flops_per_accelerator=np.full(1, 5e13),
        intra_node_gbps=2000.0, network_gbps=np.full(1, 400.0), path_efficiency=0.95, checkpoint_write_gbps=10.0,
        storage_write_gbps=800.0, node_mtbf_hours=np.full(1, np.inf), interruption_mean_hours=np.inf,
        staging_seconds=np.zeros(1),
    )
    fields.update(changes)
    return Hardware(**fields)


# A 7B-class transformer's shape (demo): 32 layers, d_model 4,096, sequences of 4,096 tokens, 32 heads.
SEVEN_B_SHAPE = Architecture(layers=32, d_model=4096.0, sequence_length=4096.0, attention_heads=32.0)


def whole(load: Load, hardware: Hardware, **options: Any) -> tuple[LayoutGrid, Any]:
    """evaluate_layouts with its candidates as one (R, K) grid."""
    candidates, fewest = evaluate_layouts(load, hardware, **options)
    return candidates.whole(), fewest
