"""The whole scaling model, network included, held to published runs through a real quote.

Narayanan et al. 2021, "Efficient Large-Scale Language Model Training on GPU Clusters Using
Megatron-LM", SC21. Hardware as the paper gives it: 8 accelerators a node, 312 TFLOP/s bf16 peak,
80 GB of memory, an intra-node fabric of 300 GB/s per direction per accelerator (2,400 Gb/s),
eight 200 Gb/s links a node (1,600 Gb/s), sequence length 2,048, the paper's global batch sizes,
full activation recomputation (§5.1: throughput counts the recomputed forward pass), so the
catalog's utilisation is on the hardware-FLOPs basis.

One sustained-efficiency constant serves every row: 0.50 of peak. It is calibrated, not
independent: the paper's rows imply 0.48-0.59 of peak before their pipeline bubbles (achieved
TFLOP/s × (1 + (p−1)/m) / 312), and berth's own layout on this network hides its data-parallel
traffic behind compute, so its prediction is the constant itself; 0.50 brings every row within
the ±15% asked. The ZeRO-3 rows of Table 2 (144 → 44 TFLOP/s) are not held: this model does not
see what slowed ZeRO-3 at scale there.
"""

import json
import subprocess
import sys
from pathlib import Path
from typing import Any

import numpy as np
import pytest

from service.contract.catalog import CatalogIn
from service.contract.request import QuoteRequestIn
from service.domain import dominance
from service.usecases.quoting import quote
from tests.domain.builders import SEVEN_B_SHAPE, hardware, load, whole

SEQUENCE, VOCABULARY = 2048, 51_200
SUSTAINED_EFFICIENCY = 0.50
PAPER_HARDWARE: dict[str, Any] = {
    "name": "published-hardware", "currency": "EUR", "finance": {"cost_of_capital_annual": 0.08},
    "accelerators": [{"id": "paper-acc", "memory_gb": 80, "peak_tflops": {"bf16": 312},
                      "utilisation": SUSTAINED_EFFICIENCY}],
    "node_types": [{"id": "paper-node", "accelerator": "paper-acc", "accelerators_per_node": 8,
                    "intra_node_gbps": 2400, "network_gbps": 1600, "power_kw_peak": 6.0, "power_kw_idle": 1.5,
                    "checkpoint_write_gbps": 100}],
    "sites": [],
    "offers": [{"id": "paper-cluster", "provider": "published run", "region": "paper", "jurisdiction": "US",
                "node_type": "paper-node", "nodes_max": 4096, "network_path": "rdma",
                "on_demand_per_accelerator_hour": 1.0}],
}


def parameters(layers: int, hidden: int) -> float:
    """Narayanan et al. 2021, §5.1, Eq. 2: P = 12·l·h²·(1 + 13/(12h) + (V+s)/(12·l·h))."""
    return 12 * layers * hidden**2 * (1 + 13 / (12 * hidden) + (VOCABULARY + SEQUENCE) / (12 * layers * hidden))


def request(*, layers: int, hidden: int, heads: int, accelerators: int, batch: int, tokens: float,
            model_parameters: float | None = None) -> dict[str, Any]:
    return {
        "campaign": {"name": "published run", "team": "architecture",
                     "work": {"kind": "transformer", "parameters": model_parameters or parameters(layers, hidden),
                              "tokens": tokens, "layers": layers, "d_model": hidden, "sequence_length": SEQUENCE,
                              "attention_heads": heads, "activation_recompute": "full",
                              "global_batch_tokens": batch * SEQUENCE}},
        "options": {"terms": ["on_demand"], "fixed_accelerators": accelerators, "utilisation_basis": "hardware"},
    }


def quoted(body: dict[str, Any]) -> dict[str, Any]:
    option: dict[str, Any] = quote(CatalogIn.model_validate(PAPER_HARDWARE), QuoteRequestIn.model_validate(body))[
        "options"][0]
    return option


# Table 2, PTD parallelism rows: (layers, hidden, heads, accelerators, batch, TFLOP/s, days for 300B tokens).
TABLE_2_PTD = [
    (96, 12288, 96, 384, 1536, 153, 84),
    (96, 12288, 96, 768, 1536, 149, 43),
    (96, 12288, 96, 1536, 1536, 141, 23),
    (105, 20480, 128, 560, 2240, 171, 156),
    (105, 20480, 128, 1120, 2240, 167, 80),
    (105, 20480, 128, 2240, 2240, 159, 42),
]


@pytest.mark.parametrize(("layers", "hidden", "heads", "accelerators", "batch", "tflops", "days"), TABLE_2_PTD)
def test_berths_own_layout_on_the_papers_hardware_predicts_table_2_within_15_percent(
    layers: int, hidden: int, heads: int, accelerators: int, batch: int, tflops: float, days: float
) -> None:
    option = quoted(request(layers=layers, hidden=hidden, heads=heads, accelerators=accelerators, batch=batch,
                            tokens=300e9))
    assert option["feasible"], option["reasons"]
    predicted_days = option["timing"]["wall_clock_days"]
    # The paper's throughput counts Eq. 3's FLOPs (recomputation included) over n·time.
    flops = 96 * layers * hidden**2 * (1 + SEQUENCE / (6 * hidden) + VOCABULARY / (16 * layers * hidden)) * 300e9
    predicted_tflops = flops / (predicted_days * 86400 * accelerators) / 1e12
    assert predicted_days == pytest.approx(days, rel=0.15)
    assert predicted_tflops == pytest.approx(tflops, rel=0.15)
    assert option["memory"]["fits"]


# §5.1: "P = 175 billion ... T = 300 billion tokens ... n = 1024 ... 34 days"; the 1T model
# (Table 1: 1008.0 billion parameters, 128 layers, h = 25,600, 160 heads, batch 3,072), 450 billion
# tokens on 3,072 accelerators, 84 days. GPT-3's 175B: 96 layers, h = 12,288, 96 heads, batch 1,536.
SECTION_5_1 = [
    (96, 12288, 96, 1024, 1536, 300e9, 175e9, 34),
    (128, 25600, 160, 3072, 3072, 450e9, 1008e9, 84),
]


@pytest.mark.parametrize(("layers", "hidden", "heads", "accelerators", "batch", "tokens", "size", "days"),
                         SECTION_5_1)
def test_berth_quote_gives_the_end_to_end_days_of_section_5_1_within_15_percent(
    tmp_path: Path, layers: int, hidden: int, heads: int, accelerators: int, batch: int, tokens: float,
    size: float, days: float,
) -> None:
    (tmp_path / "catalog.json").write_text(json.dumps(PAPER_HARDWARE))
    body = request(layers=layers, hidden=hidden, heads=heads, accelerators=accelerators, batch=batch, tokens=tokens,
                   model_parameters=size)
    (tmp_path / "campaign.json").write_text(json.dumps(body))
    done = subprocess.run([sys.executable, "-m", "service.cli", "quote", str(tmp_path / "campaign.json"),
                           "--catalog", str(tmp_path / "catalog.json"), "--format", "json"],
                          capture_output=True, text=True, timeout=120, check=True)
    option = json.loads(done.stdout)["options"][0]
    assert option["feasible"], option["reasons"]
    assert option["timing"]["wall_clock_days"] == pytest.approx(days, rel=0.15)
    # The network is modelled: the layout's collectives take time on the node link each step (hidden
    # or not), and the link needed for 95% is stated.
    assert sum(c["seconds_per_step"] for c in option["timing"]["collectives"]) > 0
    assert option["timing"]["network_gbps_needed_for_95pct"] > 0


def test_a_70b_model_on_2e12_tokens_fits_80_gib_accelerators_by_splitting_it() -> None:
    # The 70B shape of the issue that reported it (80 layers, d_model 8,192, 64 heads, sequence
    # 4,096), no recomputation: one layer's activations alone, unsplit, are
    # 4096·8192·(34 + 5·64·4096/8192) = 6.5 GB, 520 GB for 80 layers (Korthikanti Eq. 1).
    body = {
        "campaign": {"name": "seventy", "team": "language",
                     "work": {"kind": "transformer", "parameters": 70e9, "tokens": 2e12, "layers": 80,
                              "d_model": 8192, "sequence_length": 4096, "attention_heads": 64,
                              "global_batch_tokens": 4e6}},
        "options": {"terms": ["on_demand"]},
    }
    option = quoted(body)
    layout, memory = option["layout"], option["memory"]
    assert option["feasible"], option["reasons"]
    assert layout["tensor"] > 1 or layout["pipeline"] > 1
    used = memory["model_state_bytes_per_accelerator"] + memory["activation_bytes_per_accelerator"]
    assert used <= 0.9 * 80 * 2**30


def test_the_deadline_layout_is_the_fewest_nodes_that_meet_it() -> None:
    # The paper's 175B split (t = 8, p = 12, ZeRO-1) with the node count left to berth: a node
    # unit is 12 nodes (96 accelerators, one replica); 84 days on 384 accelerators, so 60 days
    # need about 540.
    shape = {"tensor": 8, "pipeline": 12, "zero_stage": 1}
    body = request(layers=96, hidden=12288, heads=96, accelerators=0, batch=1536, tokens=300e9)
    body["options"].pop("fixed_accelerators")
    body["options"]["layout"] = shape
    body["campaign"]["deadline_days"] = 60
    option = quoted(body)
    layout = option["layout"]
    assert option["feasible"] and layout["decided_by"] == "deadline"
    assert option["timing"]["wall_clock_days"] <= 60
    fewer = request(layers=96, hidden=12288, heads=96, accelerators=layout["accelerators"] - 96, batch=1536,
                    tokens=300e9)
    fewer["options"]["layout"] = shape
    assert quoted(fewer)["timing"]["wall_clock_days"] > 60


@pytest.mark.parametrize("limit", [1e5, 1e12])
def test_the_candidate_layouts_do_not_grow_with_the_venues_node_limit(
        limit: float, monkeypatch: pytest.MonkeyPatch) -> None:
    run = load(parameters=7e9, tokens=1e12, architecture=SEVEN_B_SHAPE,
               deadline_seconds=np.full(1, 20 * 86400.0))
    many = dominance.PRUNED_FROM  # scenarios enough to drop the dominated candidates
    small, _ = whole(run, hardware(), node_limits=[64.0], scenarios=many)
    large, _ = whole(run, hardware(), node_limits=[limit], scenarios=many)
    assert float(large.nodes.max()) <= limit
    # The search makes a handful per shape at any size; dropping the dominated ones only lessens them.
    monkeypatch.setattr(dominance, "PRUNED_FROM", 10**12)
    every_small, _ = whole(run, hardware(), node_limits=[64.0], scenarios=many)
    every_large, _ = whole(run, hardware(), node_limits=[limit], scenarios=many)
    assert every_large.nodes.shape == every_small.nodes.shape
    assert large.nodes.shape[1] <= every_large.nodes.shape[1] and small.nodes.shape[1] <= every_small.nodes.shape[1]
