"""Sweeps: parameter values, expansion, launch, early stop and resume, status, summary.

References outside the code under test: ``numpy.geomspace``/``numpy.linspace``
for the ranges; the engine's own exit codes and files for the end-to-end run;
an exact power law for the fits across a sweep.
"""
import math
import os
import subprocess
import sys

import h5py
import numpy as np
import pytest
import yaml

from shearmix.tools.sweeps.spec import (
    SweepError,
    expand,
    load_sweep,
    parameter_values,
    read_manifest,
)

ROOT = os.path.dirname(os.path.dirname(os.path.dirname(os.path.abspath(__file__))))

TINY_BASE = {
    "model": "lowpe",
    "parameters": {"Re": 40, "BPe": 1, "Pe": 0.1},
    "grid": {"Nx": 16, "Ny": 16, "Nz": 8},
    "time": {"t_end": 1.0, "dt": 0.02, "adaptive": False},
    "initial": {"kind": "laminar_noise", "amplitude": 0.1, "seed": 3},
    "output": {"diagnostics_every": 1, "progress_every": 1000, "spectra_every": 0.25},
    "compute": {"fftw_effort": "estimate", "wisdom": ""},
}


def _write(tmp_path, sweep, name="sweep.yaml"):
    p = tmp_path / name
    p.write_text(yaml.safe_dump(sweep, sort_keys=False))
    return p


def _cli(*args, cwd):
    code = "import sys; from shearmix.tools.cli import main; sys.exit(main(sys.argv[1:]))"
    # one rank per member: skip MPI start-up (solver/compute/parallel.py)
    env = dict(os.environ, OMP_NUM_THREADS="1", SHEARMIX_SERIAL="1")
    return subprocess.run([sys.executable, "-c", code, *args], cwd=cwd, env=env,
                          capture_output=True, text=True, timeout=300)


# ------------------------------------------------------------------ values
def test_ranges_match_numpy():
    assert parameter_values({"log": [0.1, 30], "count": 6}) == pytest.approx(
        np.geomspace(0.1, 30, 6), rel=1e-11)
    assert parameter_values({"from": 1, "to": 2, "count": 5}) == pytest.approx(
        np.linspace(1, 2, 5), rel=1e-12)
    assert parameter_values({"from": 0.1, "to": 0.5, "step": 0.1}) == [0.1, 0.2, 0.3, 0.4, 0.5]
    assert parameter_values([3, 1]) == [3, 1]


@pytest.mark.parametrize("spec,words", [
    ({"log": [0, 1], "count": 3}, "positive"),
    ({"from": 1, "to": 2}, "exactly one of 'count' or 'step'"),
    ({"from": 1, "to": 2, "step": -1}, "does not lead"),
    ({"log": [1, 2], "count": 0}, "count must be an integer >= 1"),
    ({"from": 1, "to": 2, "count": 2, "spacing": 3}, "unknown range key 'spacing'"),
    ([], "empty list"),
])
def test_bad_ranges_name_the_key(spec, words):
    with pytest.raises(SweepError) as e:
        parameter_values(spec, "s.yaml", "vary.parameters.BPe")
    msg = str(e.value)
    assert msg.startswith("s.yaml: vary.parameters.BPe:") and words in msg and "\n" not in msg


# ------------------------------------------------------------------ expansion
def test_product_zip_and_chain(tmp_path):
    s = {"sweep": "grid", "base_case": TINY_BASE,
         "vary": {"parameters.BPe": [4, 1, 2], "parameters.Re": [30, 40]}}
    sw = load_sweep(_write(tmp_path, s))
    assert [m.name for m in sw.members] == ["BPe4-Re30", "BPe4-Re40", "BPe1-Re30", "BPe1-Re40",
                                            "BPe2-Re30", "BPe2-Re40"]
    sw = load_sweep(_write(tmp_path, {**s, "vary": {"parameters.BPe": [1, 2], "parameters.Re": [30, 40]},
                                      "combine": "zip"}))
    assert [m.values for m in sw.members] == [{"parameters.BPe": 1, "parameters.Re": 30},
                                              {"parameters.BPe": 2, "parameters.Re": 40}]
    sw = load_sweep(_write(tmp_path, {**s, "chain": "parameters.BPe"}))
    chains = [[m.name for m in c] for c in sw.chains()]
    assert chains == [["BPe1-Re30", "BPe2-Re30", "BPe4-Re30"], ["BPe1-Re40", "BPe2-Re40", "BPe4-Re40"]]


@pytest.mark.parametrize("change,words", [
    ({"vary": {"parameters.BPee": [1]}}, "vary.parameters.BPee: not a case key"),
    ({"vary": {"parameters.BPe": [1, 2], "parameters.Re": [1]}, "combine": "zip"}, "equal length"),
    ({"combine": "cross"}, "combine: must be one of product, zip"),
    ({"vary": {"parameters.BPe": [-1]}}, "parameters.BPe"),
    ({"chain": "parameters.Re"}, "chain: must be one of the varied keys"),
    ({"vary": {"parameters.BPe": [1.00001, 1.00002]}}, "same name"),
    ({"launch": {"ranks": 0}}, "launch.ranks"),
    ({"colour": 1}, "unknown key 'colour'"),
])
def test_bad_sweep_files_name_the_problem(tmp_path, change, words):
    s = {"sweep": "bad", "base_case": TINY_BASE, "vary": {"parameters.BPe": [1, 2]}, **change}
    with pytest.raises(SweepError) as e:
        load_sweep(_write(tmp_path, s))
    assert words in str(e.value) and "\n" not in str(e.value)


def test_expand_writes_cases_and_manifest_and_protects_results(tmp_path):
    (tmp_path / "base.yaml").write_text(yaml.safe_dump(TINY_BASE))
    s = {"sweep": "tiny", "base": "base.yaml", "set": {"time.t_end": 0.5},
         "vary": {"parameters.BPe": {"log": [1, 100], "count": 3}}}
    path = _write(tmp_path, s)
    sw = load_sweep(path)
    assert expand(sw, log=lambda m: None) == ["BPe1", "BPe10", "BPe100"]
    man = read_manifest(sw.directory)
    assert [m["name"] for m in man["members"]] == ["BPe1", "BPe10", "BPe100"]
    case = yaml.safe_load((tmp_path / "tiny" / "cases" / "BPe10.yaml").read_text())
    assert case["parameters"]["BPe"] == pytest.approx(10.0) and case["time"]["t_end"] == 0.5
    assert case["name"] == "tiny-BPe10" and (tmp_path / "tiny" / "runs" / "BPe10").is_dir()
    # results in one member: its case may not change, and a failed attempt writes nothing
    (tmp_path / "tiny" / "runs" / "BPe10" / "timeseries.h5").write_bytes(b"x")
    before = (tmp_path / "tiny" / "cases" / "BPe1.yaml").read_text()
    s["set"]["time.t_end"] = 0.7
    with pytest.raises(SweepError, match="BPe10 already has results"):
        expand(load_sweep(_write(tmp_path, s)), log=lambda m: None)
    assert (tmp_path / "tiny" / "cases" / "BPe1.yaml").read_text() == before
    r = _cli("sweep", "expand", str(path), cwd=tmp_path)
    assert r.returncode == 2 and r.stderr.count("\n") == 1 and "already has results" in r.stderr


# ------------------------------------------------------------------ end to end
def _series(run_dir):
    with h5py.File(os.path.join(run_dir, "timeseries.h5")) as fh:
        return fh["t"][()], fh["step"][()]


def _states(table):
    import re
    return [re.split(r"\s{2,}", line)[1] for line in table.splitlines() if line.startswith("BPe")]


def test_tiny_sweep_runs_stops_resumes_and_summarizes(tmp_path):
    s = {"sweep": "tiny", "base_case": TINY_BASE, "vary": {"parameters.BPe": [0.5, 5]},
         "launch": {"ranks": 1, "parallel": 2}}
    path = _write(tmp_path, s)
    runs = tmp_path / "tiny" / "runs"
    # first pass: a tiny wall budget stops both members early (exit 4, checkpoint written)
    r = _cli("sweep", "run", str(path), "--wall-hours", "1e-7", cwd=tmp_path)
    assert r.returncode == 4, r.stdout + r.stderr
    st = _cli("sweep", "status", str(path), cwd=tmp_path)
    assert st.returncode == 0 and _states(st.stdout) == ["stopped early"] * 2, st.stdout
    for m in ("BPe0.5", "BPe5"):
        assert os.listdir(runs / m / "checkpoints"), "a stopped run must leave a checkpoint"
        t, _ = _series(runs / m)
        assert t[-1] < 1.0
    # second pass: both resume from their checkpoints and finish
    r = _cli("sweep", "run", str(path), cwd=tmp_path)
    assert r.returncode == 0, r.stdout + r.stderr
    assert r.stdout.count("resuming") == 2
    for m in ("BPe0.5", "BPe5"):
        t, step = _series(runs / m)
        assert t[-1] == pytest.approx(1.0) and np.all(np.diff(t) > 0)
        assert list(step) == list(range(int(step[-1]) + 1))  # continuous, no gap, no repeat
        assert "--restart latest" in (runs / m / "run.log").read_text()
    st = _cli("sweep", "status", str(path), cwd=tmp_path)
    assert _states(st.stdout) == ["finished"] * 2 and "chk_" in st.stdout, st.stdout
    # a third pass has nothing to do
    r = _cli("sweep", "run", str(path), cwd=tmp_path)
    assert r.returncode == 0 and r.stdout.count("skipped (finished)") == 2
    # summary across the sweep: one row per member, fits need 3 BPe values
    r = _cli("sweep", "summarize", str(path), "--no-plots", "--start", "0", cwd=tmp_path)
    assert r.returncode == 0, r.stderr
    rows = list(__import__("csv").DictReader(open(tmp_path / "tiny" / "summary.csv")))
    assert [row["member"] for row in rows] == ["BPe0.5", "BPe5"]
    assert [float(row["BPe"]) for row in rows] == [0.5, 5.0]
    assert "needs 3 or more distinct BPe values" in r.stdout
    # each member's label is printed beside the numbers of the table that produced it
    for row in rows:
        line = next(ln for ln in r.stdout.splitlines() if ln.strip().startswith(row["member"] + " "))
        assert row["regime"] in line
        for k in ("isotropy", "viscous_ratio", "eta", "quiet_fraction"):
            shown = f"{float(row[k]):.4g}" if row[k] else "-"
            assert shown in line.split(row["regime"])[-1], (k, shown, line)


def test_failed_member_reports_its_reason(tmp_path):
    base = {**TINY_BASE, "time": {"max_steps": 200, "dt": 50.0, "adaptive": False},
            "parameters": {"Re": 1e6, "BPe": 1}, "initial": {"kind": "laminar_noise",
                                                             "amplitude": 0.5}}
    s = {"sweep": "boom", "base_case": base, "vary": {"parameters.BPe": [1]}}
    path = _write(tmp_path, s)
    r = _cli("sweep", "run", str(path), cwd=tmp_path)
    assert r.returncode == 1
    st = _cli("sweep", "status", str(path), cwd=tmp_path)
    line = [x for x in st.stdout.splitlines() if x.startswith("BPe1")][0]
    assert "failed" in line and "blow-up" in line
    # not retried unless asked
    r = _cli("sweep", "run", str(path), cwd=tmp_path)
    assert "use --retry" in r.stdout


# ------------------------------------------------------------------ fits across a sweep
def test_fit_rows_recovers_exact_power_law_and_selects(tmp_path):
    import csv

    from shearmix.tools.sweeps.summary import fit_rows, write_fits
    rng = np.random.default_rng(4)
    bpe = np.geomspace(0.1, 100, 7)
    rows = []
    for i, x in enumerate(bpe):
        y = 2.0 * x ** (-1 / 3) * math.exp(0.01 * rng.standard_normal())
        rows.append({"BPe": float(x), "Lz_turb": y, "Lz_turb_err": 0.01 * y,
                     "w_rms": 0.5 * x ** (-1 / 6), "w_rms_err": float("nan"),
                     "D_flux": float("nan"), "D_estimate": 1.0,
                     "regime": "stratified_turbulence" if i < 5 else "viscous_layers"})
    fits = {f["y"]: f for f in fit_rows(rows)}
    out = tmp_path / "fits.csv"
    write_fits(list(fits.values()), str(out), "all runs")
    table = list(csv.DictReader(open(out)))
    assert [r["selection"] for r in table] == ["all runs"] * 4 and table[0]["y"] == "Lz_turb"
    lz = fits["Lz_turb"]
    assert lz["weighted"] and lz["p_lo"] < -1 / 3 < lz["p_hi"] and lz["consistent"]
    w = fits["w_rms"]  # exact data, no error bars: unweighted, exact exponent
    assert not w["weighted"] and w["p"] == pytest.approx(-1 / 6, abs=1e-12)
    assert "p" not in fits["D_flux"] and "needs 3" in fits["D_flux"]["note"]
    sel = {f["y"]: f for f in fit_rows(rows, regime="stratified_turbulence")}
    assert sel["Lz_turb"]["n"] == 5 and sel["Lz_turb"]["x_hi"] == pytest.approx(bpe[4])
    sel = {f["y"]: f for f in fit_rows(rows, x_range=(1, 50))}  # 1, 3.16, 10, 31.6
    assert sel["Lz_turb"]["n"] == 4


def test_fit_rows_keeps_integer_bpe():
    """BPe read as an int (1, 10, 100) is a number like 1.0: the exact law y = 2 x^(-1/2)
    fits with p = -1/2 over all three rows (the selection dropped ints before)."""
    from shearmix.tools.sweeps.summary import fit_rows
    rows = [{"BPe": b, "D_flux": 2.0 * b ** -0.5, "regime": "stratified_turbulence"}
            for b in (1, 10, 100.0)]
    (f,) = fit_rows(rows, quantities=("D_flux",))
    assert f["n"] == 3 and f["p"] == pytest.approx(-0.5, abs=1e-12)
    # a bool or a text cell is not a BPe
    (g,) = fit_rows(rows + [{"BPe": True, "D_flux": 1.0}, {"BPe": "3", "D_flux": 1.0}],
                    quantities=("D_flux",))
    assert g["n"] == 3


# ------------------------------------------------------------------ batch scripts
@pytest.mark.parametrize("system,submit", [("slurm", "sbatch"), ("pbs", "qsub")])
def test_batch_script_resubmits_on_exit_4_only(tmp_path, system, submit):
    """Render a job script with a stand-in run command and a fake submitter on PATH,
    then execute it with bash: exit 4 -> one resubmission, counted and capped."""
    from shearmix.tools.sweeps.batch import write_batch_scripts
    sw = load_sweep(_write(tmp_path, {"sweep": "jobs", "base_case": TINY_BASE,
                                      "vary": {"parameters.BPe": [1, 2]}}))
    flag = tmp_path / "code"
    paths = write_batch_scripts(sw, system, walltime="01:00:00", ranks=2, max_resubmits=2,
                                account="acct7", queue="short",
                                run_command=f"(exit $(cat {flag}))")
    assert len(paths) == 2
    text = open(paths[0]).read()
    assert "@" not in text.replace("@NAME@", "") and "acct7" in text and "short" in text
    assert subprocess.run(["bash", "-n", paths[0]]).returncode == 0
    fake = tmp_path / "bin"
    fake.mkdir()
    (fake / submit).write_text(f"#!/bin/sh\necho \"$@\" >> {tmp_path}/submitted\n")
    (fake / submit).chmod(0o755)
    env = dict(os.environ, PATH=f"{fake}:{os.environ['PATH']}")

    def job(code):
        flag.write_text(str(code))
        return subprocess.run(["bash", paths[0]], env=env, capture_output=True, text=True).returncode

    submitted = tmp_path / "submitted"
    assert job(0) == 0 and not submitted.exists()
    assert job(3) == 3 and not submitted.exists()
    assert job(4) == 4 and submitted.read_text().split() == [paths[0]]
    assert job(4) == 4 and len(submitted.read_text().split()) == 2
    assert job(4) == 4 and len(submitted.read_text().split()) == 2  # cap of 2 reached


def test_batch_rejects_bad_walltime(tmp_path):
    path = _write(tmp_path, {"sweep": "jobs", "base_case": TINY_BASE,
                             "vary": {"parameters.BPe": [1]}})
    r = _cli("sweep", "batch", str(path), "--system", "slurm", "--walltime", "90min", cwd=tmp_path)
    assert r.returncode == 2 and "--walltime: must be HH:MM:SS" in r.stderr
    assert not (tmp_path / "jobs").exists()


def test_chained_member_starts_from_its_neighbour(tmp_path):
    s = {"sweep": "chain", "base_case": {**TINY_BASE, "time": {"t_end": 0.4, "dt": 0.02,
                                                               "adaptive": False}},
         "vary": {"parameters.BPe": [5, 1]}, "chain": "parameters.BPe"}
    path = _write(tmp_path, s)
    r = _cli("sweep", "run", str(path), "--parallel", "2", cwd=tmp_path)
    assert r.returncode == 0, r.stdout + r.stderr
    assert r.stdout.index("BPe1: finished") < r.stdout.index("BPe5: starting")
    assert "BPe5: starts from BPe1's state at t = 0.4" in r.stdout
    t, step = _series(tmp_path / "chain" / "runs" / "BPe5")
    assert t[0] == pytest.approx(0.4) and t[-1] == pytest.approx(0.8)
    st = _cli("sweep", "status", str(path), cwd=tmp_path)
    assert [x for x in st.stdout.splitlines() if x.startswith("BPe5")][0].split()[3] == "0.8/0.8"
    with h5py.File(tmp_path / "chain" / "runs" / "BPe5" / "timeseries.h5") as fh:
        assert "BPe: 5" in fh.attrs["case"]


@pytest.mark.parametrize("system,submit,job_id", [("slurm", "sbatch", "SLURM_JOB_ID"),
                                                  ("pbs", "qsub", "PBS_JOBID")])
def test_batch_script_runs_with_the_installed_mpi_on_a_clean_path(tmp_path, system, submit,
                                                                   job_id):
    """The generated job, run by bash with only a stub submitter and the system folders
    on PATH (as a compute node has before any module load), runs its member to the end
    with the environment's own mpiexec, and each job keeps its own log."""
    from shearmix.tools.sweeps.batch import write_batch_scripts
    here = os.path.join(os.path.dirname(sys.executable), "mpiexec")
    if not os.path.exists(here):
        pytest.skip("this environment has no MPI of its own (SHEARMIX_SYSTEM_MPI=1)")
    base = dict(TINY_BASE, time={"t_end": 0.04, "dt": 0.02, "adaptive": False})
    sw = load_sweep(_write(tmp_path, {"sweep": "jobs", "base_case": base,
                                      "vary": {"parameters.BPe": [1]}}))
    (path,) = write_batch_scripts(sw, system, walltime="01:00:00", ranks=1)
    text = open(path).read()
    assert f"--launcher '{here} -n {{ranks}}'" in text and "module load" in text
    stub = tmp_path / "stub"
    stub.mkdir()
    (stub / submit).write_text(f"#!/bin/sh\necho \"$@\" >> {tmp_path}/submitted\n")
    (stub / submit).chmod(0o755)
    env = {"PATH": f"{stub}:/usr/bin:/bin", "HOME": str(tmp_path), "OMP_NUM_THREADS": "1"}
    member = sw.members[0]
    logs = []
    for n in ("101", "102"):
        r = subprocess.run(["bash", path], env=dict(env, **{job_id: n}), capture_output=True,
                           text=True, timeout=300)
        assert r.returncode == 0, r.stdout + r.stderr
        if system == "pbs":  # SLURM itself writes batch-%j.out; the PBS job does it
            log = os.path.join(sw.run_dir(member), f"batch-{n}.out")
            assert os.path.exists(log)
            logs.append(open(log).read())
    assert os.path.exists(os.path.join(sw.run_dir(member), "timeseries.h5"))
    assert not (tmp_path / "submitted").exists()
    if system == "pbs":
        assert logs[0] and logs[1] and logs[0] != logs[1]  # the second job did not overwrite


def test_batch_launcher_follows_the_recorded_mpi(tmp_path):
    from shearmix.tools.sweeps.batch import MPI_RECORD, installed_mpi, launcher
    (tmp_path / MPI_RECORD).write_text("system\n")
    assert installed_mpi(str(tmp_path)) == "system"
    assert launcher("slurm", "system") == "srun -n {ranks}"
    assert launcher("pbs", "system") == "mpiexec -n {ranks}"
    (tmp_path / MPI_RECORD).write_text("bundled\n")
    assert installed_mpi(str(tmp_path)) == "bundled"
    here = os.path.join(os.path.dirname(sys.executable), "mpiexec")
    assert launcher("pbs", "bundled") == f"{here} -n {{ranks}}"


def test_batch_template_missing_is_a_one_line_error(tmp_path, monkeypatch):
    import shearmix.tools.sweeps.batch as batch
    sw = load_sweep(_write(tmp_path, {"sweep": "jobs", "base_case": TINY_BASE,
                                      "vary": {"parameters.BPe": [1]}}))
    monkeypatch.setattr(batch, "template_path", lambda system: str(tmp_path / "none.sh.in"))
    with pytest.raises(batch.BatchError, match=r"none\.sh\.in: cannot read the pbs template.*"
                                               r"source tree"):
        batch.write_batch_scripts(sw, "pbs")

def test_duplicate_key_and_quoted_number_in_sweep_file(tmp_path):
    # YAML 1.2 section 3.2.1.1: mapping keys are unique
    p = tmp_path / "dup.yaml"
    p.write_text("sweep: s\nbase_case: {model: lowpe}\nvary:\n  parameters.Re: [20]\n"
                 "  parameters.Re: [30]\n")
    with pytest.raises(SweepError, match=r"line 5: duplicate key 'parameters.Re' "
                                         r"\(first given at line 4\)"):
        load_sweep(str(p))
    base = dict(TINY_BASE, parameters={"Re": "40", "BPe": 1, "Pe": 0.1})
    p = _write(tmp_path, {"sweep": "q", "base_case": base, "vary": {"parameters.BPe": [1]}})
    with pytest.raises(SweepError, match=r"parameters.Re: must be a number > 0, got the string"):
        load_sweep(str(p))
    p = _write(tmp_path, {"sweep": "q", "base_case": TINY_BASE,
                          "vary": {"parameters.BPe": {"from": "1", "to": 2, "count": 2}}})
    with pytest.raises(SweepError, match=r"vary.parameters.BPe.from: must be a finite number, "
                                         r"got the string '1'"):
        load_sweep(str(p))


# ------------------------------------------------------------------ progress while members run
def test_progress_line_estimates_time_left():
    from shearmix.tools.sweeps.launch import progress_line
    # mean of finished (100 s, 200 s) = 150 s; a's own estimate 30 s, b has run 20 s of ~150 s;
    # 2 waiting: (30 + 130 + 2 * 150) / 2 slots = 230 s (arithmetic)
    line = progress_line(6, 2, 0, [("a", 50, 30), ("b", 20, None)], 400, [100, 200], 2)
    assert line == ("sweep: 2 of 6 done; running: a (0m50s), b (0m20s); 2 waiting; "
                    "elapsed 6m40s, about 3m50s left")
    # before any member finished, a running member's own estimate stands for every member
    line = progress_line(3, 0, 0, [("a", 10, 50)], 10, [], 1)
    assert line.endswith("about 2m50s left")  # 50 + 2 * 60
    line = progress_line(3, 1, 1, [("a", 10, None)], 10, [], 1)
    assert "(1 failed or stopped)" in line and line.endswith("time left unknown yet")


def test_sweep_run_shows_progress_while_members_run(tmp_path):
    from shearmix.tools.sweeps.launch import run_members
    base = {**TINY_BASE, "time": {"t_end": 0.2, "dt": 0.02, "adaptive": False}}
    sweep = load_sweep(str(_write(tmp_path, {"sweep": "prog", "base_case": base,
                                             "vary": {"parameters.BPe": [0.5, 5]}})))
    expand(sweep, log=lambda m: None)
    lines = []
    env = dict(os.environ, OMP_NUM_THREADS="1", SHEARMIX_SERIAL="1")
    codes = run_members(sweep, log=lines.append, env=env, report_seconds=3600)
    assert codes == {"BPe0.5": 0, "BPe5": 0}
    progress = [ln for ln in lines if " done" in ln]
    assert progress[0].startswith("sweep: 0 of 2 done; running: BPe0.5 (")
    assert "; 1 waiting; elapsed " in progress[0] and "time left unknown yet" in progress[0]
    assert any(ln.startswith("sweep: 1 of 2 done; running: BPe5 (") and "about" in ln
               for ln in progress)
    assert progress[-1].startswith("sweep: 2 of 2 done; running: none; 0 waiting; elapsed ")
    assert progress[-1].endswith("about 0m00s left")
