"""The ``stability`` subcommand: outputs with provenance, bad input rejected before work."""
import argparse
import math

import pytest

from shearmix.tools.stability import cli
from shearmix.tools.stability.tables import read_csv

CASE = """name: invented-layer
model: lowpe
parameters: {Re: 50, BPe: 1.0}
forcing: {kf: 1, amplitude: laminar}
box: {Lx: 4*pi, Ly: 2*pi, Lz: 2*pi}
grid: {Nx: 16, Ny: 32, Nz: 16}
time: {t_end: 10}
"""


def run(argv):
    parser = argparse.ArgumentParser(prog="shearmix")
    sub = parser.add_subparsers(dest="command")
    cli.add_arguments(sub)
    args = parser.parse_args(["stability"] + argv)
    return args.func(args)


@pytest.fixture
def case(tmp_path):
    p = tmp_path / "case.yaml"
    p.write_text(CASE)
    return str(p)


def test_map_csv_records_case_and_version(case, tmp_path, capsys):
    out = tmp_path / "map.csv"
    assert run(["map", case, "--kx", "0.1:1:4", "--kz", "0:1:3", "--csv", str(out)]) == 0
    comments, rows = read_csv(str(out))
    assert any(c.startswith("version: ") for c in comments)
    assert any("name: invented-layer" in c for c in comments)
    assert len(rows) == 12
    text = capsys.readouterr().out
    assert "most unstable (refined)" in text


def test_point_without_case(capsys):
    assert run(["point", "--model", "lowpe", "--Re", "50", "--BPe", "1", "--kx", "0.5"]) == 0
    assert "converged" in capsys.readouterr().out


@pytest.mark.parametrize("argv,needle", [
    (["point", "--model", "lowpe", "--Re", "50", "--kx", "0.5"], "--BPe"),
    (["point", "--model", "boussinesq", "--Re", "50", "--B", "1", "--kx", "0.5"], "--B, --Pe"),
    (["point", "CASE", "--Re", "3", "--kx", "0.5"], "--Re"),
    (["point", "CASE", "--set", "parameters.Re=-1", "--kx", "0.5"], "parameters.Re"),
    (["neutral", "CASE", "--vary", "B", "--along", "kx", "--k", "0.1:0.5:3", "--other", "0"],
     "--vary"),
])
def test_bad_input_one_line_exit_2(case, argv, needle, capsys):
    argv = [case if a == "CASE" else a for a in argv]
    assert run(argv) == 2
    err = capsys.readouterr().err.strip().splitlines()
    assert len(err) == 1 and needle in err[0]


def test_existing_output_is_kept(case, tmp_path, capsys):
    out = tmp_path / "keep.csv"
    out.write_text("earlier results\n")
    assert run(["map", case, "--kx", "0.1:1:2", "--csv", str(out)]) == 2
    assert out.read_text() == "earlier results\n"
    assert "--force" in capsys.readouterr().err


def test_bad_range_rejected_by_parser(case):
    with pytest.raises(SystemExit) as exc:
        run(["map", case, "--kx", "1:0:3"])
    assert exc.value.code == 2


def test_mode_writes_file_for_fastest_box_mode(case, tmp_path, capsys):
    import h5py
    out = tmp_path / "m.h5"
    assert run(["mode", case, "-o", str(out)]) == 0
    with h5py.File(out, "r") as fh:
        assert fh.attrs["kind"] == "perturbation"
        assert "invented-layer" in fh.attrs["case"]
        # fastest box mode of this case: i = 1 (kx = 0.5), j = 0
        assert fh.attrs["index_x"] == 1 and fh.attrs["index_z"] == 0
        assert fh["u"].shape == (16, 32, 16)


def test_box_warns_when_box_too_short(tmp_path, capsys):
    p = tmp_path / "short.yaml"
    p.write_text(CASE.replace("Lx: 4*pi", "Lx: 2*pi"))
    assert run(["box", str(p)]) == 0
    out = capsys.readouterr().out
    assert "warning: box.Lx" in out
    assert "0 unstable box modes" in out


# ------------------------------------------------- issue 14 item 8: commands that do not mislead
def test_fixed_truncation_is_checked_and_flagged(capsys):
    # Re = 1e4, kx = 0.99: the automatic truncation converges to growth 0.0190 (|n| <= 93);
    # |n| <= 12 gives 0.0019 and must not be called converged
    argv = ["point", "--model", "lowpe", "--Re", "1e4", "--BPe", "0", "--kx", "0.99"]
    assert run(argv + ["--harmonics", "12"]) == 0
    out = capsys.readouterr().out
    assert "fixed by --harmonics), NOT converged" in out and "nan" not in out
    assert "warning: truncation |n| <= 12 is not converged" in out
    assert run(argv) == 0
    auto = capsys.readouterr().out
    assert "growth +0.0190" in auto and ", converged" in auto
    assert run(argv + ["--harmonics", "120"]) == 0
    out = capsys.readouterr().out
    assert "growth +0.0190" in out and "), converged" in out and "warning" not in out


def test_map_says_when_fastest_point_is_on_the_edge(capsys):
    base = ["map", "--model", "lowpe", "--Re", "50", "--BPe", "1", "--kz", "0:1:3"]
    assert run(base + ["--kx", "0.1:0.5:5"]) == 0  # growth still rising at kx = 0.5
    assert "upper edge of the --kx range (kx = 0.5)" in capsys.readouterr().out
    # kz = 0 is not an open edge: the growth rate is even in kz (reflection symmetry)
    assert run(base + ["--kx", "0.1:0.9:9"]) == 0
    assert "edge" not in capsys.readouterr().out


def test_neutral_re_needs_no_re(capsys):
    # 2D Kolmogorov flow, laminar amplitude 1: neutral Re(kx) > sqrt(2) (Meshalkin & Sinai 1961)
    assert run(["neutral", "--model", "lowpe", "--BPe", "1", "--vary", "Re", "--along", "kx",
                "--k", "0.2", "--other", "0"]) == 0
    out = capsys.readouterr().out
    assert "Re=(varied)" in out
    value = float(out.split("Re=")[-1].split()[0])
    assert math.sqrt(2) < value < 1.6


def test_numeric_options_take_case_file_expressions(capsys):
    assert run(["point", "--model", "lowpe", "--Re", "100/2", "--BPe", "1", "--kx", "1/2"]) == 0
    a = capsys.readouterr().out
    assert run(["point", "--model", "lowpe", "--Re", "50", "--BPe", "1", "--kx", "0.5"]) == 0
    b = capsys.readouterr().out
    assert "Re=50 " in a and a.splitlines()[1].split(":")[1] == b.splitlines()[1].split(":")[1]


@pytest.mark.parametrize("argv", [["point", "--kx"], ["point", "--kx", "1/x"], [],
                                  ["box", "CASE", "--bogus"]])
def test_argument_errors_are_one_line(case, argv, capsys):
    argv = [case if a == "CASE" else a for a in argv]
    with pytest.raises(SystemExit) as exc:
        run(argv)
    assert exc.value.code == 2
    err = capsys.readouterr().err.strip().splitlines()
    assert len(err) == 1 and "error:" in err[0] and "usage" not in err[0]


@pytest.mark.parametrize("action", [["box"], ["mode", "-o", "m.h5"]])
def test_box_and_mode_refuse_parameter_options_like_the_others(case, action, capsys):
    assert run(action + [case, "--Re", "3"]) == 2
    err = capsys.readouterr().err.strip().splitlines()
    assert len(err) == 1 and "--Re: with a case file change parameters with --set" in err[0]
