"""Case files: every class of bad input gives one clear line; defaults and derived numbers."""
import math

import pytest

from shearmix.solver.case import CaseError, case_from_text, load_case, parse_length

GOOD = """
name: t
model: lowpe
parameters: {Re: 100, BPe: 2}
grid: {Nx: 32, Ny: 16, Nz: 16}
time: {t_end: 5}
"""


def _err(text, overrides=None):
    with pytest.raises(CaseError) as exc:
        case_from_text(text, "case.yaml", overrides)
    msg = str(exc.value)
    assert "\n" not in msg and msg.startswith("case.yaml") or msg.startswith("--set")
    return msg


def test_good_case_and_defaults():
    c = case_from_text(GOOD)
    assert c.Re == 100 and c.BPe == 2 and c.Pe is None and c.B is None
    assert c.lengths == pytest.approx((4 * math.pi, 2 * math.pi, 2 * math.pi))
    assert c.F0 == pytest.approx(1 / 100) and c.U_L == pytest.approx(1.0)
    assert c.convention.startswith("laminar")
    assert c.output_directory.endswith("t")


def test_forcing_conventions():
    c = case_from_text(GOOD, overrides=["forcing.amplitude=unit"])
    assert c.F0 == 1 and c.U_L == pytest.approx(100)
    c = case_from_text(GOOD, overrides=["forcing.amplitude=0.5", "forcing.kf=2",
                                        "grid.Ny=32"])
    assert c.U_L == pytest.approx(0.5 * 100 / 4)


def test_lengths():
    assert parse_length("4pi") == pytest.approx(4 * math.pi)
    assert parse_length("2 * pi / 3") == pytest.approx(2 * math.pi / 3)
    assert parse_length(3) == 3.0
    with pytest.raises(ValueError):
        parse_length("__import__('os')")


def test_unknown_key_suggests_nearest():
    msg = _err(GOOD + "tiem: {dt: 1}\n")
    assert "unknown key tiem" in msg and "did you mean time" in msg
    msg = _err(GOOD.replace("Re: 100", "Rey: 100, Re: 100"))
    assert "parameters.Rey" in msg and "parameters.Re" in msg


def test_wrong_type_and_range():
    assert "parameters.Re: must be a number > 0, got 'abc'" in _err(GOOD.replace("100", "abc"))
    assert "parameters.Re: must be a number > 0, got -1" in _err(GOOD.replace("100", "-1"))
    assert "grid.Nx: must be an integer >= 4" in _err(GOOD.replace("Nx: 32", "Nx: 2.5"))
    assert "grid.Nx: must be even" in _err(GOOD.replace("Nx: 32", "Nx: 33"))
    assert "time.cfl: must be a number > 0 and <= 2" in _err(GOOD, ["time.cfl=3"])
    assert "model: must be one of boussinesq, lowpe" in _err(GOOD.replace("lowpe", "lowpee"))
    assert "box.Lx" in _err(GOOD + "box: {Lx: 'four pi'}\n")


def test_missing_and_contradictory_parameters():
    assert "parameters.BPe: missing" in _err(GOOD.replace(", BPe: 2", ""))
    full = GOOD.replace("lowpe", "boussinesq").replace("BPe: 2", "B: 3")
    assert "parameters.Pe: missing" in _err(full)
    assert "Pe and parameters.Pr both given" in _err(full.replace("B: 3", "B: 3, Pe: 1, Pr: 1"))
    assert "parameters.BPe: belongs to model lowpe" in _err(
        full.replace("B: 3", "B: 3, Pe: 1, BPe: 3"))
    assert "parameters.B: belongs to model boussinesq" in _err(GOOD.replace("BPe: 2", "BPe: 2, B: 1"))
    assert "model: missing" in _err(GOOD.replace("model: lowpe", ""))
    assert "no stop condition" in _err(GOOD.replace("time: {t_end: 5}", ""))


def test_unreadable_yaml_names_line():
    msg = _err(GOOD + "grid: [1, 2\n")
    assert "not valid YAML at line" in msg


def test_bad_override_and_missing_file(tmp_path):
    assert "--set parameters.Rf: unknown key" in _err(GOOD, ["parameters.Rf=3"])
    assert "expected key=value" in _err(GOOD, ["parameters.Re"])
    with pytest.raises(CaseError, match="cannot read case file"):
        load_case(str(tmp_path / "nope.yaml"))


def test_forcing_must_fit_box_and_grid():
    assert "forcing.kf" in _err(GOOD, ["forcing.kf=1.5"])
    assert "grid.Ny" in _err(GOOD, ["forcing.kf=6"])


def test_box_too_short_warns():
    c = case_from_text(GOOD, overrides=["box.Lx=2*pi"])
    assert any("cannot go unstable" in w for w in c.warnings)
    assert not case_from_text(GOOD).warnings


# ------------------------------------------------------------ refused inputs (issue 14 item 7)
BLOCK = """name: t
model: lowpe
parameters:
  Re: 20
  BPe: 2
  Re: 30
grid: {Nx: 32, Ny: 16, Nz: 16}
time: {t_end: 5}
"""


def test_duplicate_key_names_key_and_both_lines():
    # YAML 1.2 section 3.2.1.1: the keys of a mapping are unique (PyYAML lets the last win)
    msg = _err(BLOCK)
    assert "line 6" in msg and "duplicate key 'Re'" in msg and "first given at line 4" in msg
    msg = _err(GOOD + "parameters: {Re: 3, BPe: 1}\n")  # GOOD starts with an empty line
    assert "line 7: duplicate key 'parameters' (first given at line 4)" in msg


def test_quoted_number_is_refused_with_its_line():
    msg = _err(BLOCK.replace("  Re: 30\n", "").replace("Re: 20", 'Re: "20"'))
    assert "line 4: parameters.Re: must be a number > 0" in msg and "'20'" in msg
    assert "quotes" in msg
    assert "grid.Nx" in _err(GOOD.replace("Nx: 32", "Nx: '32'"))
    assert "time.t_end" in _err(GOOD, ["time.t_end='5'"])


def test_unquoted_numbers_and_expressions_still_read():
    # '1e6' without a dot is a string in YAML 1.1 but a float in YAML 1.2 (section 10.2.1.4)
    c = case_from_text(GOOD.replace("Re: 100", "Re: 1e6") + "box: {Lx: 4*pi, Ly: '2*pi'}\n")
    assert c.Re == 1e6 and c.Lx == pytest.approx(4 * math.pi) and c.Ly == pytest.approx(2 * math.pi)
    assert case_from_text(GOOD, overrides=["parameters.Re=2e3"]).Re == 2000.0


def test_empty_file_says_so(tmp_path):
    for text in ("", "# only a comment\n"):
        msg = _err(text)
        assert msg.startswith("case.yaml: empty file")


def test_convention_has_one_name_and_old_spellings_still_read():
    for old, new in (("unit-laminar", "laminar"), ("unit-forcing", "unit")):
        c = case_from_text(GOOD + f"forcing: {{amplitude: {old}}}\n")
        assert c.get("forcing.amplitude") == new and c.convention.startswith(new + " (")
