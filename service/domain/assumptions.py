"""Every default the model may use, with its value, unit and source.

A quote lists the defaults it actually used under `assumptions`; the model version hashes this
table, so changing a default changes the version that stored quotes are audited against.
"""

from dataclasses import dataclass

PRACTICE = "common practice"


@dataclass(frozen=True)
class Assumption:
    name: str
    value: float
    unit: str
    source: str


_TABLE = (
    Assumption("bytes_per_parameter_model_states", 16.0, "bytes",
               "Rajbhandari et al. 2020, ZeRO, SC20, §3.1 (mixed-precision Adam: 2 + 2 + 12)"),
    Assumption("gradient_bytes_per_parameter", 2.0, "bytes",
               "bf16 gradients; Rajbhandari et al. 2020, ZeRO, §7 (Ψ = 2N bytes)"),
    Assumption("training_flops_per_parameter_token", 6.0, "FLOPs",
               "Kaplan et al. 2020, Scaling Laws for Neural Language Models, §2.1, Table 1"),
    Assumption("full_recompute_flops_factor", 4.0 / 3.0, "ratio",
               "Narayanan et al. 2021, SC21, §5.1, Eq. 3-4 (8ND instead of 6ND)"),
    Assumption("selective_recompute_flops_factor", 1.027, "ratio",
               "Korthikanti et al. 2022, Reducing Activation Recomputation in Large "
               "Transformer Models (2.7% overhead)"),
    Assumption("activation_reserve_fraction", 0.25, "fraction of accelerator memory",
               PRACTICE + " (activations reserved when the architecture is not given)"),
    Assumption("usable_memory_fraction", 0.90, "fraction of accelerator memory",
               PRACTICE + " (allocator headroom)"),
    Assumption("micro_batch_sequences", 1.0, "sequences",
               "Narayanan et al. 2021, SC21, Table 2 (micro-batch 1; a larger one only adds memory and "
               "pipeline bubble in this model, whose sustained efficiency does not vary with it)"),
    Assumption("head_dim", 128.0, "d_model per attention head",
               PRACTICE + " (attention heads = d_model / 128 when not given)"),
    Assumption("global_batch_tokens", 4.0e6, "tokens per step", PRACTICE),
    Assumption("path_efficiency_overlay", 0.30, "fraction of link speed",
               PRACTICE + " (encapsulating container overlay, about 30 Gb/s on a 100 Gb/s link)"),
    Assumption("path_efficiency_direct", 0.90, "fraction of link speed",
               PRACTICE + " (virtual function passed through to the guest)"),
    Assumption("path_efficiency_rdma", 0.95, "fraction of link speed", PRACTICE),
    Assumption("communication_overlap", 0.80, "fraction of compute time",
               PRACTICE + " (share of the compute a collective overlaps with that hides it: the gradient "
               "reduction overlaps the last micro-batch's backward pass, ZeRO-3's gathers every micro-batch; "
               "tensor-parallel and pipeline sends are on the critical path)"),
    Assumption("latency_intra_node_us", 5.0, "µs per algorithm step",
               PRACTICE + " (α of the α–β model inside a node; Hockney 1994, Parallel Computing 20(3))"),
    Assumption("latency_inter_node_us", 10.0, "µs per algorithm step",
               PRACTICE + " (α of the α–β model across nodes; Hockney 1994, Parallel Computing 20(3))"),
    Assumption("storage_write_gbps", 800.0, "Gb/s",
               PRACTICE + " (the shared storage's write bandwidth that checkpoints of all nodes share, "
               "when a site or offer does not state it)"),
    Assumption("target_scaling_efficiency", 0.95, "fraction", PRACTICE),
    Assumption("restart_minutes", 10.0, "minutes",
               "Daly 2006, FGCS 22(3), worked examples use R = 10 min; " + PRACTICE),
    Assumption("busy_load_fraction", 1.0, "fraction of (peak - idle) power",
               PRACTICE + " (training keeps busy nodes near peak power; conservative)"),
    Assumption("hours_per_month", 730.0, "hours", "8760 h / 12"),
    Assumption("kw_per_ton_of_refrigeration", 3.516853, "kW",
               "NIST SP 811, App. B.8 (1 ton = 12,000 Btu_IT/h)"),
    Assumption("resale_fraction", 0.25, "fraction of a node's price",
               "assumed, no published source: what a retired node fetches when sold, for fleet plans; "
               "set each site's resale_fraction"),
    Assumption("data_link_gbps", 10.0, "Gb/s",
               PRACTICE + " (link for copying a dataset when neither end states one)"),
)

DEFAULTS: dict[str, Assumption] = {a.name: a for a in _TABLE}


def default(name: str) -> float:
    """The value of one default, by name."""
    return DEFAULTS[name].value
