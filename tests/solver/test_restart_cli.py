"""``shearmix run --restart`` and ``shearmix info`` as a user meets them (subprocesses)."""
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
time: {max_steps: 12, dt: 0.02}
initial: {amplitude: 0.1}
output: {diagnostics_every: 2, progress_every: 4, checkpoint_every: 0.1, snapshot_every: 0.2}
compute: {fftw_effort: estimate, wisdom: ''}
"""

# dies (as if killed) while filling the second checkpoint's second field
KILL_SECOND_WRITE = """
import os, shearmix.solver.files.checkpoint as ck
_real, _n = ck._columns_crc, [0]
def _crc(block):
    _n[0] += 1
    if _n[0] == 4:
        os._exit(9)
    return _real(block)
ck._columns_crc = _crc
"""


@pytest.fixture
def cli(monkeypatch, capsys, tmp_path):
    """``shearmix`` in this process (no start-up cost); returns code, stdout, stderr."""
    from shearmix.tools.cli import main
    monkeypatch.setenv("SHEARMIX_SERIAL", "1")
    monkeypatch.chdir(tmp_path)

    def run(*args, cwd=None):
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


def _checkpoints(folder):
    return sorted(n for n in os.listdir(folder / "checkpoints") if n.startswith("chk_"))


def _snapshot_state(folder):
    return {p: p.read_bytes() for p in sorted(folder.rglob("*")) if p.is_file()}


def test_killed_mid_write_then_restart_latest_continues_from_previous(cli_process, case_file,
                                                                      tmp_path):
    r = cli_process("run", str(case_file), "-o", "out", "--set", "time.max_steps=40", cwd=tmp_path,
                    pre=KILL_SECOND_WRITE)
    assert r.returncode == 9, r.stdout + r.stderr
    out = tmp_path / "out"
    (only,) = _checkpoints(out)
    partial = [n for n in os.listdir(out / "checkpoints") if n.endswith(".tmp")]
    assert partial and partial[0] != only  # the second write never got its name
    step = int(only[4:13])
    r = cli_process("run", str(case_file), "-o", "out", "--restart", "latest", cwd=tmp_path)
    assert r.returncode == 0, r.stderr
    assert f"restarting from out/checkpoints/{only} at step {step}" in r.stdout
    with h5py.File(out / "timeseries.h5") as fh:
        steps = fh["step"][()]
    assert np.all(np.diff(steps) > 0) and steps[-1] == step + 12  # monotonic, no repeats
    assert not [n for n in os.listdir(out / "checkpoints") if n.endswith(".tmp")]


def test_restart_from_bad_files_fails_in_one_line_and_touches_nothing(cli, case_file, tmp_path):
    assert cli("run", str(case_file), "-o", "out").returncode == 0
    out = tmp_path / "out"
    newest = out / "checkpoints" / _checkpoints(out)[-1]
    cut = tmp_path / "cut.h5"
    cut.write_bytes(newest.read_bytes()[:5000])
    foreign = tmp_path / "foreign.h5"
    with h5py.File(foreign, "w") as fh:
        fh["data"] = np.zeros(4)
    before = _snapshot_state(out)
    for path, what in ((cut, "truncated HDF5 file"), (foreign, "not a shearmix checkpoint"),
                       (tmp_path / "none.h5", "no such file")):
        r = cli("run", str(case_file), "-o", "out", "--restart", str(path))
        assert r.returncode == 2, r.stdout + r.stderr
        assert r.stderr.count("\n") == 1 and f"{path}: " in r.stderr and what in r.stderr
        assert r.stdout == ""
    r = cli("run", str(case_file), "-o", "out", "--restart", "latest",
             "--set", "box.Lx=6.28")
    assert r.returncode == 2 and "box.Lx: cannot change at restart" in r.stderr
    assert _snapshot_state(out) == before


def test_folder_rules_for_restart(cli, case_file, tmp_path):
    r = cli("run", str(case_file), "-o", "fresh", "--restart", "latest")
    assert r.returncode == 2 and "no complete checkpoint to restart from" in r.stderr
    assert not (tmp_path / "fresh").exists()
    assert cli("run", str(case_file), "-o", "a").returncode == 0
    assert cli("run", str(case_file), "-o", "b").returncode == 0
    r = cli("run", str(case_file), "-o", "a")
    assert r.returncode == 2 and "--restart latest" in r.stderr
    # b's checkpoint may seed a new folder, but not another run's folder
    b_ckpt = str(tmp_path / "b" / "checkpoints" / _checkpoints(tmp_path / "b")[-1])
    r = cli("run", str(case_file), "-o", "a", "--restart", b_ckpt)
    assert r.returncode == 2 and "is not one of its checkpoints" in r.stderr
    # an older checkpoint of the same folder would discard what followed it
    oldest = str(tmp_path / "a" / "checkpoints" / _checkpoints(tmp_path / "a")[0])
    r = cli("run", str(case_file), "-o", "a", "--restart", oldest)
    assert r.returncode == 2 and f"{oldest}: older than the newest checkpoint" in r.stderr
    # checkpoints alone mark a run too; overwrite replaces them all
    os.remove(tmp_path / "a" / "timeseries.h5")
    r = cli("run", str(case_file), "-o", "a")
    assert r.returncode == 2 and "already holds a run (checkpoints)" in r.stderr
    r = cli("run", str(case_file), "-o", "a", "--set", "output.overwrite=true",
            "--set", "time.max_steps=3")
    assert r.returncode == 0
    assert max(_checkpoints(tmp_path / "a")) == "chk_000000003.h5"  # step-12 ones are gone
    # a run folder given to --restart stands for its newest checkpoint
    r = cli("run", str(case_file), "-o", "c", "--restart", str(tmp_path / "b"),
            "--set", "parameters.Re=90", "--set", "grid.Nz=12")
    assert r.returncode == 0, r.stderr
    assert f"restarting from {b_ckpt} at step 12" in r.stdout
    assert "changed: grid.Nz 8 -> 12, parameters.Re 60.0 -> 90.0" in r.stdout
    r = cli("info", str(tmp_path / "c" / "checkpoints" / _checkpoints(tmp_path / "c")[-1]))
    assert r.returncode == 0
    assert "changed grid.Nz: 8 -> 12, parameters.Re: 60.0 -> 90.0" in r.stdout
    assert "grid        16 x 16 x 12" in r.stdout


def test_info_prints_header_of_checkpoint_and_snapshot(cli, case_file, tmp_path):
    assert cli("run", str(case_file), "-o", "out").returncode == 0
    ckpt = tmp_path / "out" / "checkpoints" / _checkpoints(tmp_path / "out")[-1]
    r = cli("info", str(ckpt), "--verify")
    assert r.returncode == 0, r.stderr
    for text in ("kind        checkpoint", "step 12", "model       boussinesq (fields a, p, T)",
                 "Re = 60", "B = 1", "Pe = 30", "grid        16 x 16 x 8",
                 "checksums   all columns verified", "1. start at t = 0, step 0"):
        assert text in r.stdout, text
    snap = sorted((tmp_path / "out" / "snapshots").glob("*.h5"))[0]
    r = cli("info", str(snap))
    assert r.returncode == 0 and "kind        snapshot" in r.stdout and "stride 1" in r.stdout
    r = cli("info", str(case_file))
    assert r.returncode == 2 and r.stderr.count("\n") == 1 and "not an HDF5 file" in r.stderr
