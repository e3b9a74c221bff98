"""Run-folder rules: damaged checkpoints set aside, cut-back to an older checkpoint, the
start of a run's history, and the same overwrite rules from Python as from the CLI.

The checks are of the program's own rules (docs/checkpoints.md); the
damaged files are made the way a disk or a killed copy damages them: bytes
flipped inside a field, a file cut short.
"""
import os
import subprocess

import h5py
import numpy as np
import pytest

CASE = """
name: tiny
model: boussinesq
parameters: {Re: 60, B: 1, Pe: 30}
grid: {Nx: 16, Ny: 16, Nz: 8}
time: {max_steps: 12, dt: 0.02, adaptive: false}
initial: {amplitude: 0.1}
output: {diagnostics_every: 2, progress_every: 4, checkpoint_every: 0.06, checkpoint_keep: 3}
compute: {fftw_effort: estimate, wisdom: ''}
"""


@pytest.fixture
def cli(monkeypatch, capsys, tmp_path):
    """``shearmix`` in this process; returns code, stdout, stderr."""
    from shearmix.tools.cli import main
    monkeypatch.setenv("SHEARMIX_SERIAL", "1")
    monkeypatch.chdir(tmp_path)

    def run(*args):
        capsys.readouterr()
        code = main(list(args))
        out, err = capsys.readouterr()
        return subprocess.CompletedProcess(args, code, out, err)
    return run


@pytest.fixture
def case_file(tmp_path):
    p = tmp_path / "tiny.yaml"
    p.write_text(CASE)
    return p


def _names(folder):
    return sorted(os.listdir(folder / "checkpoints"))


def _checkpoints(folder):
    return [n for n in _names(folder) if n.endswith(".h5")]


def _flip_field_bytes(path):
    """Flip bytes inside the stored ``state/a`` (the header stays readable)."""
    with h5py.File(path, "r") as fh:
        offset = fh["state/a"].id.get_offset()
    assert offset is not None
    with open(path, "r+b") as fh:
        fh.seek(offset + 100)
        raw = bytearray(fh.read(16))
        fh.seek(offset + 100)
        fh.write(bytes(b ^ 0xFF for b in raw))


def _steps(folder):
    with h5py.File(folder / "timeseries.h5") as fh:
        return fh["step"][()]


def test_flipped_bytes_in_newest_then_latest_continues_from_the_older_one(cli, case_file,
                                                                          tmp_path):
    assert cli("run", str(case_file), "-o", "out").returncode == 0
    out = tmp_path / "out"
    older, newest = _checkpoints(out)[-2:]
    _flip_field_bytes(out / "checkpoints" / newest)
    r = cli("run", str(case_file), "-o", "out", "--restart", "latest",
            "--set", "time.max_steps=6")
    assert r.returncode == 0, r.stderr
    assert f"{newest}.damaged" in _names(out)
    assert "checksum mismatch" in r.stderr and f"set aside as out/checkpoints/{newest}.damaged" \
        in r.stderr
    assert f"restarting from out/checkpoints/{older} at step {int(older[4:13])}" in r.stdout
    steps = _steps(out)
    assert np.all(np.diff(steps) > 0)


def test_flipped_bytes_in_the_named_newest_is_set_aside_and_refused(cli, case_file, tmp_path):
    assert cli("run", str(case_file), "-o", "out").returncode == 0
    out = tmp_path / "out"
    newest = _checkpoints(out)[-1]
    _flip_field_bytes(out / "checkpoints" / newest)
    before = _steps(out)
    r = cli("run", str(case_file), "-o", "out", "--restart", f"out/checkpoints/{newest}")
    assert r.returncode == 2
    assert r.stderr.count("\n") == 1 and "checksum mismatch" in r.stderr
    assert f"set aside as out/checkpoints/{newest}.damaged" in r.stderr
    assert "continue with --restart latest" in r.stderr
    assert np.array_equal(_steps(out), before)  # the series is untouched


def test_flipped_bytes_in_newest_then_the_older_one_named_is_accepted(cli, case_file, tmp_path):
    assert cli("run", str(case_file), "-o", "out").returncode == 0
    out = tmp_path / "out"
    older, newest = _checkpoints(out)[-2:]
    _flip_field_bytes(out / "checkpoints" / newest)
    r = cli("run", str(case_file), "-o", "out", "--restart", f"out/checkpoints/{older}",
            "--set", "time.max_steps=2")
    assert r.returncode == 0, r.stderr
    assert f"{newest}.damaged" in _names(out) and newest not in _checkpoints(out)
    assert np.all(np.diff(_steps(out)) > 0)


def test_truncated_newest_is_set_aside_and_never_counts_among_the_kept(cli, case_file,
                                                                       tmp_path):
    assert cli("run", str(case_file), "-o", "out").returncode == 0
    out = tmp_path / "out"
    kept = _checkpoints(out)
    assert len(kept) == 3
    cut = out / "checkpoints" / kept[-1]
    cut.write_bytes(cut.read_bytes()[:4000])
    # the continued run's checkpoints fall on other steps (steps 10 and 13)
    r = cli("run", str(case_file), "-o", "out", "--restart", "latest",
            "--set", "time.max_steps=4", "--set", "output.checkpoint_every=0.1")
    assert r.returncode == 0, r.stderr
    after = _checkpoints(out)
    assert after == [kept[1], "chk_000000010.h5", "chk_000000013.h5"]  # three good ones
    assert f"{kept[-1]}.damaged" in _names(out)


def test_damaged_file_does_not_count_among_the_kept_at_prune(make_case, tmp_path):
    from shearmix.solver.files.checkpoint import list_checkpoints, prune, write_checkpoint
    from shearmix.solver.run.simulation import Simulation
    sim = Simulation(make_case(grid={"Nx": 16, "Ny": 8, "Nz": 8}, initial={"amplitude": 0.1}))
    paths = []
    for _ in range(3):
        sim.advance()
        paths.append(write_checkpoint(sim, str(tmp_path)))
    with open(paths[1], "r+b") as fh:
        fh.truncate(3000)
    sim.advance()
    paths.append(write_checkpoint(sim, str(tmp_path)))
    prune(str(tmp_path), 2, paths[-1])
    assert [p for _, p in list_checkpoints(str(tmp_path))] == [paths[2], paths[3]]
    assert os.path.exists(paths[1] + ".damaged")


def test_older_good_checkpoint_cuts_the_folder_back_with_overwrite(cli, case_file, tmp_path):
    assert cli("run", str(case_file), "-o", "out").returncode == 0
    out = tmp_path / "out"
    first, *newer = _checkpoints(out)
    step = int(first[4:13])
    r = cli("run", str(case_file), "-o", "out", "--restart", f"out/checkpoints/{first}")
    assert r.returncode == 2 and "older than the newest checkpoint" in r.stderr
    assert "output.overwrite=true" in r.stderr and _checkpoints(out) == [first] + newer
    r = cli("run", str(case_file), "-o", "out", "--restart", f"out/checkpoints/{first}",
            "--set", "output.overwrite=true", "--set", "time.max_steps=2")
    assert r.returncode == 0, r.stderr
    for name in newer:  # set aside, never deleted
        assert f"{name}.superseded" in _names(out)
    steps = _steps(out)
    assert np.all(np.diff(steps) > 0) and steps[-1] == step + 2


def test_history_starts_where_the_run_started(cli, case_file, tmp_path):
    assert cli("run", str(case_file), "-o", "out").returncode == 0
    first = _checkpoints(tmp_path / "out")[0]
    assert first != "chk_000000000.h5"  # the first file is written after the start
    r = cli("info", f"out/checkpoints/{first}")
    assert r.returncode == 0
    assert "1. start at t = 0, step 0 on 1 rank(s)" in r.stdout, r.stdout


def test_python_run_refuses_a_folder_that_holds_a_run(make_case, tmp_path):
    from shearmix.solver.run.simulation import EXIT_BAD_INPUT, Simulation
    case = make_case(grid={"Nx": 16, "Ny": 8, "Nz": 8}, time={"t_end": None, "max_steps": 3})
    out = str(tmp_path / "run")
    assert Simulation(case).run(output=out, log=lambda m: None) == 0
    before = {n: open(os.path.join(out, n), "rb").read() for n in ("timeseries.h5", "case.yaml")}
    said = []
    assert Simulation(case).run(output=out, log=said.append) == EXIT_BAD_INPUT
    assert any("already holds a run" in m for m in said)
    assert {n: open(os.path.join(out, n), "rb").read() for n in before} == before


def test_python_restart_cuts_the_series_back(make_case, tmp_path):
    from shearmix.solver.files.checkpoint import FOLDER, list_checkpoints
    from shearmix.solver.run.restart import apply, check
    from shearmix.solver.run.simulation import Simulation
    case = make_case(grid={"Nx": 16, "Ny": 8, "Nz": 8}, initial={"amplitude": 0.1},
                     time={"t_end": None, "max_steps": 6, "adaptive": False, "dt": 0.01},
                     output={"diagnostics_every": 1, "checkpoint_every": 0.03})
    out = str(tmp_path / "run")
    assert Simulation(case).run(output=out, log=lambda m: None) == 0
    ckpts = list_checkpoints(os.path.join(out, FOLDER))
    step, path = ckpts[-1]
    sim = Simulation(case, initial=False)
    apply(sim, path, check(path, case, sim.comm))
    assert sim.run(output=out, append=True, log=lambda m: None) == 0
    with h5py.File(os.path.join(out, "timeseries.h5")) as fh:
        steps = fh["step"][()]
    assert np.all(np.diff(steps) > 0) and steps[-1] == step + 6


def test_run_folder_under_a_file_is_bad_input_naming_it(cli, case_file, tmp_path):
    (tmp_path / "f").write_text("x")
    r = cli("run", str(case_file), "-o", "f/run")
    assert r.returncode == 2
    assert r.stderr.count("\n") == 1 and "f/run: the run folder cannot be made" in r.stderr
    assert (tmp_path / "f").read_text() == "x"


def test_run_folder_that_is_a_file_is_bad_input(cli, case_file, tmp_path):
    (tmp_path / "f").write_text("x")
    r = cli("run", str(case_file), "-o", "f")
    assert r.returncode == 2 and "f: the run folder is a file, not a folder" in r.stderr
    assert (tmp_path / "f").read_text() == "x"


def test_damaged_checkpoint_of_another_run_is_refused_and_left_in_place(cli, case_file,
                                                                        tmp_path):
    assert cli("run", str(case_file), "-o", "a").returncode == 0
    newest = tmp_path / "a" / "checkpoints" / _checkpoints(tmp_path / "a")[-1]
    _flip_field_bytes(newest)
    damaged = newest.read_bytes()
    r = cli("run", str(case_file), "-o", "b", "--restart", str(newest))
    assert r.returncode == 2 and "checksum mismatch" in r.stderr and "set aside" not in r.stderr
    assert newest.read_bytes() == damaged  # another run's file: not renamed
    assert not (tmp_path / "b").exists()


def test_unwritable_parent_is_named(tmp_path, monkeypatch):
    # root may write anywhere, so the refusal of the file system is stood in for
    from shearmix.solver.run import rundir
    monkeypatch.setattr(rundir.os, "access", lambda path, mode: False)
    with pytest.raises(rundir.RunFolderError,
                       match=f"new/run: the run folder cannot be made: no permission to write "
                             f"in {tmp_path}$"):
        rundir.creatable(str(tmp_path / "new" / "run"))
