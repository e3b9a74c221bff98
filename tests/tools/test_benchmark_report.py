"""The benchmark's tables (docs/performance.md) are computed from its JSON records."""
import os
import sys

import pytest

# the benchmark is a script beside scripts/bench, not part of the installed package
sys.path.insert(0, os.path.join(os.path.dirname(__file__), "..", "..", "scripts", "benchmarks"))
from steps import markdown  # noqa: E402


def _record(model, n, ranks, step, floor):
    return {"model": model, "n": n, "ranks": ranks, "step_seconds": step,
            "floor_seconds": floor, "ratio": step / floor, "ratio_cpu": step / floor,
            "transforms_per_step": 32, "first_step_seconds": 0.5, "bytes_per_point_net": 140.0,
            "product_pass": "blocks"}


def test_markdown_tables_and_rank_speed_up():
    report = {"version": "x", "machine": "m", "records": [
        _record("lowpe", 128, 1, 0.40, 0.32), _record("lowpe", 128, 2, 0.22, 0.18)],
        "extras": {}}
    text = markdown(report)
    assert "| lowpe | 128^3 | 1 | 0.4000 | 0.3200 | 1.25 | 1.25 | 32 | 0.50 | 140 | blocks |" in text
    assert "| lowpe | 128^3 | 0.55 | 0.55 - 0.55 |" in text  # 0.22 / 0.40


@pytest.mark.parametrize("product_pass", ["whole", "blocks"])
def test_worker_counts_the_fewest_transforms_per_stage(product_pass):
    """Per explicit stage: 3 inverse (velocity) + 5 forward (the stresses uu-ww, vv-ww,
    uv, uw, vw; the trace is a gradient) for low-Pé; +1 inverse (T) and +3 forward
    (uT, vT, wT) for the full model. Common practice for divergence-form advection."""
    from steps import worker

    from shearmix.solver.run.imex import TABLEAUX
    stages = TABLEAUX["cb3c"].stages
    for model, per_stage in (("lowpe", 8), ("boussinesq", 12)):
        rec = worker(model, 16, 2, product_pass=product_pass)
        assert rec["product_pass"] == product_pass
        assert rec["transforms_per_step"] == stages * per_stage
        assert rec["step_seconds"] > 0 and rec["floor_seconds"] > 0
        assert rec["bytes_per_point"] > 0


def test_passes_worker_times_both_product_passes_in_one_process():
    from steps import passes_worker
    rec = passes_worker("lowpe", 16, 2)
    assert rec["whole_seconds"] > 0 and rec["blocks_seconds"] > 0
    assert rec["blocks_vs_whole"] == rec["blocks_seconds"] / rec["whole_seconds"]
    text = markdown({"version": "x", "machine": "m", "records": [],
                     "extras": {"passes_lowpe_1": rec}})
    assert "- lowpe 16^3, 1 rank(s): block-wise" in text


def test_phases_worker_accounts_for_the_whole_step():
    from steps import phases_table, phases_worker
    rec = phases_worker("lowpe", 16, 3, product_pass="blocks")
    assert rec["product_pass"] == "blocks" and rec["ranks"] == 1
    (ms,) = rec["ms_per_step"]
    laps = sum(v for k, v in ms.items() if k not in ("rest", "step"))
    assert ms["rest"] >= 0 and ms["step"] > 0
    assert laps + ms["rest"] == pytest.approx(ms["step"])
    for phase in ("yz inverse", "products", "yz forward", "x inverse", "x forward"):
        assert ms[phase] > 0
    two = dict(rec, ranks=2, ms_per_step=[dict(ms, step=ms["step"] * 0.6),
                                          dict(ms, step=ms["step"] * 0.7)])
    table = phases_table([rec, two])
    assert table[0].split()[-1] == "2/1"
    step_row = [row for row in table if row.startswith("step")][0]
    assert step_row.split()[-1] == "0.70"      # the slower rank against one rank
    text = markdown({"version": "x", "machine": "m", "records": [],
                     "extras": {"phases_lowpe_1": rec, "phases_lowpe_2": two}})
    assert "Where a step's time goes at 16^3" in text and "yz inverse" in text
    # the work rows: one rank does all of its own work; two ranks that each did
    # the whole of it (as the two-rank round trip once did) show 1.00, not 0.50
    (work,) = rec["work_per_step"]
    assert work["yz inverse"] == 4 * 3 * 16 and work["yz forward"] == 4 * 5 * 16
    half = {p: w / 2 for p, w in work.items()}
    rows = phases_table([rec, dict(two, work_per_step=[half, work])])
    at = rows.index("work against 1 rank")
    yz = [row for row in rows[at:] if row.strip().startswith("yz inverse")][0]
    assert yz.split()[-3:] == ["1.00", "0.50", "1.00"]
    assert "work against 1 rank" not in phases_table(
        [dict(rec, work_per_step=None), dict(two, work_per_step=None)])


@pytest.mark.mpi
def test_phases_on_two_ranks_include_the_waits():
    from steps import launch
    rec = launch("boussinesq", 16, 2, 2, worker="--phases-worker", product_pass="blocks")
    assert rec["ranks"] == 2 and len(rec["ms_per_step"]) == 2
    for ms in rec["ms_per_step"]:
        assert "wait" in ms and ms["rest"] >= 0
        laps = sum(v for k, v in ms.items() if k not in ("rest", "step"))
        assert laps + ms["rest"] == pytest.approx(ms["step"])
    # the two ranks' work adds up to one rank's: 4 fields in, 8 out, 16 planes
    for phase, planes in (("yz inverse", 4 * 4 * 16), ("yz forward", 4 * 8 * 16)):
        assert sum(w[phase] for w in rec["work_per_step"]) == planes


def test_worker_counts_the_transforms_of_each_tracer():
    """Per explicit stage a tracer adds 1 inverse (c) and 3 forward transforms (uc, vc, wc),
    as temperature does in the full model (docs/equations.md#tracers)."""
    from steps import worker

    from shearmix.solver.run.imex import TABLEAUX
    stages = TABLEAUX["cb3c"].stages
    for tracers in (1, 2):
        rec = worker("lowpe", 16, 2, product_pass="blocks", tracers=tracers)
        assert rec["tracers"] == tracers
        assert rec["transforms_per_step"] == stages * (8 + 4 * tracers)


def test_markdown_tracers_table_against_the_runs_without():
    from steps import _against_no_tracers
    none = [dict(_record("lowpe", 128, 1, 0.40, 0.32), tracers=0, peak_rss_bytes=100 * 128 ** 3)]
    two = [dict(_record("lowpe", 128, 1, 0.52, 0.42), tracers=2, peak_rss_bytes=200 * 128 ** 3)]
    rec = dict(two[0])
    _against_no_tracers(rec, two, none, 2, 128)
    assert rec["ratio_vs_no_tracers"] == pytest.approx((0.52 / 0.42) / (0.40 / 0.32))
    assert rec["step_vs_no_tracers"] == pytest.approx(1.3)
    assert rec["bytes_per_point_per_tracer"] == pytest.approx(50.0)
    text = markdown({"version": "x", "machine": "m", "records": none + [rec], "extras": {}})
    assert "| lowpe | 128^3 | 1 | 0 | 0.4000 | 0.3200 | 1.25 |" in text
    assert "| lowpe | 128^3 | 1 | 2 | 1.24 | 0.990 | 0.990 - 0.990 | 1.30 | 50 |" in text
