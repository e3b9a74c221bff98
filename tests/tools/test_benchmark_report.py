"""The benchmark's README tables are computed from its JSON records."""
from tools.benchmark import markdown


def _record(model, n, ranks, step, floor):
    return {"model": model, "n": n, "ranks": ranks, "step_seconds": step,
            "floor_seconds": floor, "ratio": step / floor, "ratio_cpu": step / floor,
            "transforms_per_step": 32, "first_step_seconds": 0.5, "bytes_per_point_net": 140.0}


def test_markdown_tables_and_rank_speed_up():
    report = {"version": "x", "machine": "m", "records": [
        _record("lowpe", 128, 1, 0.40, 0.32), _record("lowpe", 128, 2, 0.22, 0.18)],
        "extras": {}}
    text = markdown(report)
    assert "| lowpe | 128^3 | 1 | 0.4000 | 0.3200 | 1.25 |" in text
    assert "| lowpe | 128^3 | 0.55 | 0.55 - 0.55 |" in text  # 0.22 / 0.40
