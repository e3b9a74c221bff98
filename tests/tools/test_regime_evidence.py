"""``shearmix regimes evidence`` and ``thresholds``: each threshold among a table's ordered values.

Reference: a hand-written table whose ordering, split and intervals are worked out by hand
below (the thresholds themselves are this tool's choice, not a published criterion)."""
import csv

import pytest

from shearmix.tools.analysis.evidence import format_evidence, threshold_evidence
from shearmix.tools.analysis.regimes import RegimeThresholds
from shearmix.tools.cli import main

COLS = ("member", "BPe", "regime", "isotropy", "viscous_ratio", "eta", "quiet_fraction",
        "growth", "perturbation")
ROWS = [
    ("b0.1", 0.1, "isotropic", 0.8, 9.0, 0.3, 0.02, 1.1, 0.5),
    ("b1", 1, "stratified_turbulence", 0.45, 4.0, 0.42, 0.05, 1.0, 0.6),
    ("b10", 10, "intermittent", 0.3, 2.0, 0.15, 0.35, 0.9, 0.6),
    ("b100", 100, "viscous_layers", 0.2, 0.5, 0.1, 0.6, 1.2, 0.4),
    ("b300", 300, "", "", "", "", "", "", ""),  # a member not summarised: no numbers
]


def write_table(path, cols=COLS, rows=ROWS):
    with open(path, "w", newline="") as fh:
        w = csv.writer(fh)
        w.writerow(cols)
        for r in rows:
            w.writerow([r[COLS.index(c)] for c in cols])
    return path


def read(path):
    with open(path, newline="") as fh:
        return list(csv.DictReader(fh))


def test_order_split_and_interval(tmp_path):
    ev = {e["name"]: e for e in threshold_evidence(read(write_table(tmp_path / "s.csv")))}
    iso = ev["isotropy_min"]  # 0.55, isotropic when isotropy >= 0.55
    assert [p[0] for p in iso["points"]] == ["b100", "b10", "b1", "b0.1"]  # increasing isotropy
    assert [p[4] for p in iso["points"]] == [False, False, False, True]
    # any threshold in (0.45, 0.8] keeps b0.1 alone isotropic
    assert iso["interval"] == (0.45, 0.8, False, True)
    assert iso["missing"] == ["b300"]
    vis = ev["viscous_ratio_min"]  # 1, viscous when viscous_ratio < 1: (0.5, 2.0]
    assert vis["interval"] == (0.5, 2.0, False, True)
    q = ev["quiet_fraction_max"]  # 0.2, intermittent when > 0.2: [0.05, 0.35)
    assert q["interval"] == (0.05, 0.35, True, False)
    eta = ev["eta_min"]  # 0.2, intermittent when eta < 0.2: (0.15, 0.3]
    assert eta["interval"] == (0.15, 0.3, False, True)
    assert sum(p[4] for p in eta["points"]) == 2
    lam = ev["laminar_ratio"]  # 1e-3, laminar when perturbation <= 1e-3: nobody; [0, 0.4)
    assert lam["interval"] == (0.0, 0.4, True, False) and not any(p[4] for p in lam["points"])


def test_text_puts_the_marker_between_the_members(tmp_path):
    text = format_evidence(threshold_evidence(read(write_table(tmp_path / "s.csv"))))
    block = text.split("isotropy_min = 0.55:")[1].split("\n\n")[0].splitlines()
    names = [ln.split()[0] for ln in block if ln.startswith("  b")]
    marker = next(i for i, ln in enumerate(block) if ln.startswith("  -- isotropy_min = 0.55"))
    before = [ln.split()[0] for ln in block[:marker] if ln.startswith("  b")]
    assert names == ["b100", "b10", "b1", "b0.1"] and before == ["b100", "b10", "b1"]
    assert "1 of 4 members satisfy isotropy >= 0.55; any isotropy_min in (0.45, 0.8] splits" in text
    assert "without a finite isotropy: b300" in text


def test_cli_markdown_thresholds_file_and_old_table(tmp_path, capsys):
    table = write_table(tmp_path / "s.csv")
    th = tmp_path / "th.yaml"
    th.write_text("eta_min: 0.35\n")
    assert main(["regimes", "evidence", str(table), "--markdown", "--thresholds", str(th)]) == 0
    out = capsys.readouterr().out
    assert "### eta_min = 0.35: intermittent when eta < 0.35" in out
    assert "| **eta_min = 0.35** | | | |" in out
    # with 0.35, b0.1 (eta 0.3) joins the firing side: 3 of 4
    assert "3 of 4 members satisfy eta < 0.35" in out
    # a table written before quiet_fraction existed says so instead of failing
    old = write_table(tmp_path / "old.csv", cols=("member", "BPe", "regime", "eta"))
    assert main(["regimes", "evidence", str(old)]) == 0
    assert "column 'quiet_fraction' not in the table" in capsys.readouterr().out
    # bad input: a one-line error, exit 2
    (tmp_path / "bad.csv").write_text("a,b\n1,2\n")
    assert main(["regimes", "evidence", str(tmp_path / "bad.csv")]) == 2
    assert "no 'regime' column" in capsys.readouterr().err
    assert main(["regimes", "evidence", str(tmp_path / "none.csv")]) == 2


def test_thresholds_command_round_trips(tmp_path, capsys):
    assert main(["regimes", "thresholds", "--yaml"]) == 0
    p = tmp_path / "t.yaml"
    p.write_text(capsys.readouterr().out)
    assert RegimeThresholds.from_yaml(p) == RegimeThresholds()
    p.write_text("isotropy_min: 0.75\n")
    assert main(["regimes", "thresholds", "--thresholds", str(p)]) == 0
    assert "isotropy_min         0.75" in capsys.readouterr().out
    p.write_text("isotropy_min: -1\n")
    assert main(["regimes", "thresholds", "--thresholds", str(p)]) == 2
    assert "'isotropy_min' must be a finite number >= 0" in capsys.readouterr().err


@pytest.mark.parametrize("op,value,expect", [("<", 2.0, (0.5, 2.0, False, True)),
                                             (">=", 2.0, (0.5, 2.0, False, True))])
def test_tie_at_threshold_goes_with_the_rule(op, value, expect):
    """A member exactly at the threshold: '<' does not fire on it, '>=' does; either way the
    interval ends at the tie, closed (the threshold may equal it and split the same way)."""
    rows = [{"member": "a", "regime": "x", "v": "0.5"}, {"member": "b", "regime": "y", "v": "2.0"}]

    class T(RegimeThresholds):
        @staticmethod
        def rules():
            return [("v_min", "v", op, "y", "doc")]

    th = T()
    object.__setattr__(th, "v_min", value)
    (e,) = threshold_evidence(rows, th)
    assert e["interval"] == expect
    # "<" fires on 0.5 only (2.0 is not below 2.0); ">=" fires on 2.0 only (the tie)
    assert [p[4] for p in e["points"]] == ([True, False] if op == "<" else [False, True])
