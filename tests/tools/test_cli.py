"""The command line: run, check, exit codes, and nothing written on bad input."""
import h5py
import pytest

CASE = """
name: tiny
model: lowpe
parameters: {Re: 50, BPe: 1}
grid: {Nx: 16, Ny: 16, Nz: 8}
time: {max_steps: 12}
output: {diagnostics_every: 3, progress_every: 4}
compute: {fftw_effort: estimate, wisdom: ''}
"""


@pytest.fixture
def case_file(tmp_path):
    p = tmp_path / "tiny.yaml"
    p.write_text(CASE)
    return p


def test_check_prints_derived_quantities(cli_process, case_file, tmp_path):
    r = cli_process("check", str(case_file), "--set", "forcing.amplitude=unit", cwd=tmp_path)
    assert r.returncode == 0, r.stderr
    assert "laminar amplitude U_L" in r.stdout and "50" in r.stdout
    assert "allowed rank counts" in r.stdout and "1, 2, 4, 8, 16" in r.stdout
    assert "expected memory" in r.stdout and "kmax" in r.stdout
    assert not (tmp_path / "runs").exists()


def test_run_writes_series_with_case_and_version(cli_process, case_file, tmp_path):
    r = cli_process("run", str(case_file), "--output", "out", "--set", "parameters.BPe=2",
                    cwd=tmp_path)
    assert r.returncode == 0, r.stderr
    assert "step      12" in r.stdout and "steps/s" in r.stdout
    with h5py.File(tmp_path / "out" / "timeseries.h5") as fh:
        assert list(fh["step"][()]) == [0, 3, 6, 9, 12]
        assert "BPe: 2" in fh.attrs["case"] and fh.attrs["version"]
        assert fh.attrs["convention"].startswith("laminar (")
    assert "BPe: 2" in (tmp_path / "out" / "case.yaml").read_text()


def test_bad_input_exits_2_and_writes_nothing(cli_process, case_file, tmp_path):
    r = cli_process("run", str(case_file), "--set", "parameters.Re=-3", "--output", "bad",
                    cwd=tmp_path)
    assert r.returncode == 2
    assert r.stderr.strip().count("\n") == 0 and "parameters.Re" in r.stderr
    assert not (tmp_path / "bad").exists()
    r = cli_process("run", str(tmp_path / "absent.yaml"), cwd=tmp_path)
    assert r.returncode == 2 and "cannot read case file" in r.stderr


def test_existing_results_are_not_replaced(cli_process, case_file, tmp_path):
    assert cli_process("run", str(case_file), "-o", "r1", cwd=tmp_path).returncode == 0
    series = tmp_path / "r1" / "timeseries.h5"
    before = series.read_bytes()
    r = cli_process("run", str(case_file), "-o", "r1", cwd=tmp_path)
    assert r.returncode == 2 and "already holds a run" in r.stderr
    assert series.read_bytes() == before


def test_blow_up_stops_with_message_and_code_3(cli_process, case_file, tmp_path):
    r = cli_process("run", str(case_file), "-o", "boom", "--set", "time.adaptive=false",
             "--set", "time.dt=50", "--set", "parameters.Re=1e6",
             "--set", "initial.amplitude=0.5", "--set", "time.max_steps=200", cwd=tmp_path)
    assert r.returncode == 3, r.stdout + r.stderr
    assert "blow-up at step" in r.stdout and "time.cfl" in r.stdout


def test_serial_run_without_mpi4py(cli_process, case_file, tmp_path):
    # mpi4py made unimportable: the engine must fall back to one rank
    r = cli_process("run", str(case_file), "-o", "nompi", cwd=tmp_path,
                    pre="import sys; sys.modules['mpi4py'] = None; ")
    assert r.returncode == 0, r.stderr
    assert "1 rank(s)" in r.stdout


def test_unknown_physical_pass_is_bad_input(cli_process, case_file, tmp_path, monkeypatch):
    monkeypatch.setenv("SHEARMIX_PHYSICAL_PASS", "tiles")
    r = cli_process("run", str(case_file), "--output", "out", cwd=tmp_path)
    assert r.returncode == 2
    assert "SHEARMIX_PHYSICAL_PASS='tiles': allowed are auto, blocks, whole" in r.stderr
    assert len(r.stderr.strip().splitlines()) == 1
    assert not (tmp_path / "out" / "timeseries.h5").exists()


@pytest.mark.parametrize("key,value,allowed", [("SHEARMIX_KERNELS", "fast", "numba, numpy"),
                                               ("SHEARMIX_PHYSICAL_PASS", "tiles",
                                                "auto, blocks, whole"),
                                               ("SHEARMIX_PRODUCT_PASS", "tiles",
                                                "auto, blocks, whole"),
                                               ("SHEARMIX_TRANSPOSE", "mpi",
                                                "auto, shared, alltoall")])
def test_bad_environment_switch_exits_2_and_writes_nothing(cli_process, case_file, tmp_path,
                                                           monkeypatch, key, value, allowed):
    """A mistyped engine switch is refused in one line naming it and what is allowed."""
    monkeypatch.setenv(key, value)
    r = cli_process("run", str(case_file), "--output", "bad", cwd=tmp_path)
    assert r.returncode == 2, r.stderr
    assert r.stderr.strip().count("\n") == 0
    assert f"{key}={value!r}" in r.stderr and allowed in r.stderr
    assert not (tmp_path / "bad").exists()


@pytest.mark.parametrize("var", ["SHEARMIX_PRODUCT_PASS", "SHEARMIX_PHYSICAL_PASS"])
def test_environment_sets_the_compute_keys_and_set_wins(var):
    """The environment is read once, by the command line, as defaults of ``--set``;
    the old name of the product pass still works."""
    from shearmix.tools.cli import environment_settings
    env = {var: "blocks", "SHEARMIX_KERNELS": "numpy", "SHEARMIX_TRANSPOSE": "alltoall"}
    assert environment_settings(env) == ["compute.product_pass=blocks",
                                         "compute.transpose=alltoall", "compute.kernels=numpy"]
    assert environment_settings({}) == []


def test_environment_choice_is_recorded_in_the_run_folder(cli_process, case_file, tmp_path,
                                                          monkeypatch):
    monkeypatch.setenv("SHEARMIX_PHYSICAL_PASS", "blocks")
    r = cli_process("run", str(case_file), "--output", "env", cwd=tmp_path)
    assert r.returncode == 0, r.stderr
    assert "product_pass: blocks" in (tmp_path / "env" / "case.yaml").read_text()
    r = cli_process("run", str(case_file), "--output", "env2", "--set",
                    "compute.product_pass=whole", cwd=tmp_path)
    assert r.returncode == 0, r.stderr
    assert "product_pass: whole" in (tmp_path / "env2" / "case.yaml").read_text()
