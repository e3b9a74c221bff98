"""Checkpoint files: exact round trip, header, checksums, and every way a file can be bad."""
import errno
import os
import zlib

import h5py
import numpy as np
import pytest
import yaml

from shearmix.solver.files import checkpoint as ck
from shearmix.solver.files.checkpoint import (
    CheckpointError,
    checkpoint_path,
    latest,
    list_checkpoints,
    prune,
    read_checkpoint_header,
    read_fields,
    verify,
    write_checkpoint,
)
from shearmix.solver.files.fileheader import HeaderError, read_header
from shearmix.solver.files.slabfile import WriteFailed, temporary_name
from shearmix.solver.run.simulation import EXIT_WRITE_FAILED, Simulation
from shearmix.solver.version import __version__


@pytest.fixture
def sim(make_case):
    s = Simulation(make_case(model="boussinesq", parameters={"Re": 60.0, "B": 2.0, "Pe": 30.0},
                             grid={"Nx": 16, "Ny": 8, "Nz": 8},
                             initial={"amplitude": 0.2, "seed": 3}))
    for _ in range(3):
        s.advance()
    return s


def test_round_trip_is_exact_and_header_records_case_and_version(sim, tmp_path):
    path = write_checkpoint(sim, str(tmp_path))
    assert os.path.basename(path) == f"chk_{sim.step_count:09d}.h5"
    h = read_checkpoint_header(path)
    assert h["case"] == sim.case.to_yaml() and h["version"] == __version__
    assert yaml.safe_load(h["case"])["parameters"]["B"] == 2.0
    assert (h["t"], h["step"], h["dt"]) == (sim.t, sim.step_count, sim.dt)
    assert h["grid"] == (16, 8, 8) and h["fields"] == ["a", "p", "T"]
    assert h["history"][0]["event"] == "start"
    got = read_fields(path, h, sim.grid, sim.fields)
    for i, name in enumerate(sim.fields):
        assert np.array_equal(got[name], sim.state[i])  # bit for bit
    # the stored layout: real/imaginary parts on the last axis, x index first
    with h5py.File(path) as fh:
        stored = fh["state/p"][()]
    assert np.array_equal(stored[..., 0] + 1j * stored[..., 1], sim.state[1])


def test_checksums_are_zlib_crc32_of_each_ky_column(sim, tmp_path):
    path = write_checkpoint(sim, str(tmp_path))
    with h5py.File(path) as fh:
        data, crc = fh["state/T"][()], fh["crc32/T"][()]
    # reference: zlib's CRC-32 of the little-endian bytes of state/T[:, j]
    expect = [zlib.crc32(np.ascontiguousarray(data[:, j]).astype("<f8").tobytes())
              for j in range(data.shape[1])]
    assert list(crc) == expect
    assert verify(path)["step"] == sim.step_count


def _flip_byte_in(path, dataset):
    with h5py.File(path) as fh:
        offset = fh[dataset].id.get_offset()  # contiguous storage: raw bytes start here
    with open(path, "r+b") as fh:
        fh.seek(offset + 100)
        b = fh.read(1)
        fh.seek(offset + 100)
        fh.write(bytes([b[0] ^ 0x40]))


def test_damaged_data_is_caught_by_the_checksum(sim, tmp_path):
    path = write_checkpoint(sim, str(tmp_path))
    _flip_byte_in(path, "state/a")
    # byte 100 is float 12 of the C-ordered (16, 8, 5, 2) array: ky column (12 // 10) % 8
    column = (100 // 8 // (5 * 2)) % 8
    read_checkpoint_header(path)  # the header is still fine ...
    with pytest.raises(CheckpointError, match=f"checksum mismatch in state/a at ky column {column};"):
        verify(path)  # ... the data is not
    with pytest.raises(CheckpointError, match=f"{path}: damaged checkpoint: checksum"):
        read_fields(path, read_checkpoint_header(path), sim.grid, ["a"])


def test_truncated_foreign_missing_and_incomplete_files(sim, tmp_path):
    good = write_checkpoint(sim, str(tmp_path))
    size = os.path.getsize(good)
    cut = tmp_path / "cut.h5"
    cut.write_bytes(open(good, "rb").read()[: size // 2])
    foreign = tmp_path / "foreign.h5"
    with h5py.File(foreign, "w") as fh:
        fh["x"] = np.arange(3)
    text = tmp_path / "notes.h5"
    text.write_text("not hdf5\n")
    incomplete = tmp_path / "incomplete.h5"
    with h5py.File(good) as src, h5py.File(incomplete, "w") as dst:
        for k, v in src.attrs.items():
            if k != "complete":
                dst.attrs[k] = v
    cases = {str(cut): "truncated HDF5 file", str(foreign): "not a shearmix checkpoint",
             str(text): "not an HDF5 file", str(tmp_path / "absent.h5"): "no such file",
             str(incomplete): "incomplete checkpoint", str(tmp_path): "is a folder"}
    for path, what in cases.items():
        with pytest.raises(CheckpointError) as err:
            read_checkpoint_header(path)
        msg = str(err.value)
        assert msg.startswith(f"{path}: ") and what in msg and "\n" not in msg, msg


def test_a_snapshot_is_not_taken_for_a_checkpoint(sim, tmp_path):
    from shearmix.solver.files.snapshots import write_snapshot
    snap = write_snapshot(sim, str(tmp_path))
    assert read_header(snap)["kind"] == "snapshot"
    with pytest.raises(HeaderError, match="is a shearmix snapshot, not a checkpoint"):
        read_header(snap, "checkpoint")


def test_killed_mid_write_leaves_previous_and_latest_skips_partial(sim, tmp_path, monkeypatch):
    first = write_checkpoint(sim, str(tmp_path))
    sim.advance()

    class Killed(BaseException):
        """Stands for the process dying: nothing after it runs."""

    def die(*args):
        raise Killed()
    monkeypatch.setattr(ck, "_columns_crc", die)
    with pytest.raises(Killed):
        write_checkpoint(sim, str(tmp_path))
    partial = temporary_name(checkpoint_path(str(tmp_path), sim.step_count))
    assert os.path.exists(partial)  # a dead process cleans nothing up
    monkeypatch.undo()
    assert [p for _, p in list_checkpoints(str(tmp_path))] == [first]
    assert latest(str(tmp_path)) == first
    verify(first)


def test_latest_passes_over_a_damaged_newest_file(sim, tmp_path):
    first = write_checkpoint(sim, str(tmp_path))
    sim.advance()
    second = write_checkpoint(sim, str(tmp_path))
    with open(second, "r+b") as fh:
        fh.truncate(os.path.getsize(second) // 3)
    skipped = []
    assert latest(str(tmp_path), skipped) == first
    assert len(skipped) == 1 and skipped[0].startswith(f"{second}: truncated")


def test_prune_keeps_the_newest_and_removes_stale_temporaries(sim, tmp_path):
    paths = []
    for _ in range(4):
        sim.advance()
        paths.append(write_checkpoint(sim, str(tmp_path)))
    stale = tmp_path / ".chk_000000001.h5.tmp"
    stale.write_bytes(b"partial")
    removed = prune(str(tmp_path), 2, paths[-1])
    assert sorted(removed) == sorted(paths[:2] + [str(stale)])
    assert [p for _, p in list_checkpoints(str(tmp_path))] == paths[2:]
    assert prune(str(tmp_path), 1, str(tmp_path / "chk_999999999.h5")) == []  # not complete


def test_run_keeps_checkpoint_keep_files_and_ends_with_one(make_case, tmp_path):
    case = make_case(grid={"Nx": 16, "Ny": 8, "Nz": 8}, time={"t_end": None, "max_steps": 9},
                     output={"checkpoint_every": 0.02, "checkpoint_keep": 2},
                     initial={"amplitude": 0.1})
    s = Simulation(case)
    assert s.run(output=str(tmp_path), log=lambda m: None) == 0
    found = list_checkpoints(str(tmp_path / "checkpoints"))
    assert len(found) == 2 and found[-1][0] == s.step_count == 9
    assert not [n for n in os.listdir(tmp_path / "checkpoints") if n.endswith(".tmp")]


def test_failing_write_keeps_previous_checkpoint_and_stops(make_case, tmp_path, monkeypatch):
    case = make_case(grid={"Nx": 16, "Ny": 8, "Nz": 8}, time={"t_end": None, "max_steps": 40},
                     output={"checkpoint_every": 0.05}, initial={"amplitude": 0.1})
    s = Simulation(case)
    real = ck._columns_crc
    calls = {"n": 0}

    def disk_full_on_second_file(block):
        calls["n"] += 1
        if calls["n"] > 2:  # fields a and p of the first checkpoint go through
            raise OSError(errno.ENOSPC, os.strerror(errno.ENOSPC))
        return real(block)
    monkeypatch.setattr(ck, "_columns_crc", disk_full_on_second_file)
    lines = []
    code = s.run(output=str(tmp_path), log=lines.append)
    monkeypatch.undo()
    assert code == EXIT_WRITE_FAILED == 5
    folder = tmp_path / "checkpoints"
    (step, first), = list_checkpoints(str(folder))
    verify(first)
    failed = checkpoint_path(str(folder), s.step_count)
    message = [ln for ln in lines if "could not be written" in ln]
    assert message and f"{failed}: could not be written (No space left on device" in message[0]
    assert "last complete checkpoint is kept" in message[0]
    assert s.step_count < 40 and not os.listdir(folder) == []
    assert not [n for n in os.listdir(folder) if n.endswith(".tmp")]


def test_checkpoint_folder_that_cannot_be_made_stops_before_any_step(make_case, tmp_path):
    # a path under a regular file: fails for root too, unlike a chmod'ed folder
    (tmp_path / "checkpoints").write_text("in the way")
    s = Simulation(make_case(grid={"Nx": 16, "Ny": 8, "Nz": 8}))
    lines = []
    assert s.run(output=str(tmp_path), log=lines.append) == EXIT_WRITE_FAILED
    assert s.step_count == 0
    assert any(f"{tmp_path / 'checkpoints'}: checkpoints cannot be written" in ln for ln in lines)
    assert (tmp_path / "checkpoints").read_text() == "in the way"


def test_write_failure_is_reported_with_file_and_reason(sim, tmp_path):
    target = tmp_path / "file"
    target.write_text("x")
    with pytest.raises(WriteFailed) as err:
        write_checkpoint(sim, str(target))  # a folder that is a file
    assert str(err.value).startswith(str(target / "chk_"))
    assert "could not be written (" in str(err.value) and "\n" not in str(err.value)


def test_wall_clock_budget_stops_with_a_checkpoint_and_code_4(make_case, tmp_path):
    case = make_case(grid={"Nx": 16, "Ny": 8, "Nz": 8},
                     time={"t_end": None, "max_steps": 100000, "wall_hours": 0.5 / 3600})
    s = Simulation(case)
    lines = []
    assert s.run(output=str(tmp_path), log=lines.append) == 4
    assert 0 < s.step_count < 100000
    assert any("wall-clock budget of" in ln for ln in lines)
    ((step, path),) = list_checkpoints(str(tmp_path / "checkpoints"))
    assert step == s.step_count and verify(path)["t"] == s.t


def test_wall_clock_cadence_writes_when_minutes_have_passed(make_case, tmp_path, monkeypatch):
    clock = {"now": 1000.0}
    monkeypatch.setattr(ck.time, "monotonic", lambda: clock["now"])  # a clock we drive
    case = make_case(grid={"Nx": 16, "Ny": 8, "Nz": 8}, time={"t_end": None, "max_steps": 6},
                     output={"checkpoint_minutes": 1.0, "checkpoint_keep": 10})
    s = Simulation(case)
    real_step = s._step_with

    def step(*args):  # every step takes 40 s of wall clock
        clock["now"] += 40.0
        return real_step(*args)
    s._step_with = step
    assert s.run(output=str(tmp_path), log=lambda m: None) == 0
    # 80 s >= 60 s at step 2, 80 s after that at step 4, and the final one at step 6
    assert [n for n, _ in list_checkpoints(str(tmp_path / "checkpoints"))] == [2, 4, 6]
