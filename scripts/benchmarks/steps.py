"""Benchmark of the time step against its transform floor, and memory per grid point.

    python scripts/benchmarks/steps.py [--sizes 64 128] [--ranks 1 2] [--models lowpe boussinesq]
                              [--tracers 0 1 2] [--steps 20] [--json FILE]

Each (model, size, rank count) runs in its own ``mpiexec`` job so that peak
resident memory is that run's alone. Inside the job: plans are made (with
wisdom), two warm-up steps are taken and one more counts the transforms a
step performs; then ``--steps`` steps are timed one by one (median reported),
each followed by the transform floor: the forward and inverse transforms one
step performs, executed alone with the same transform objects and the step's
own work arrays, in the same process, also a median. Alternating the two keeps
a change of the machine's load from biasing the ratio. Both are
taken in wall-clock and in CPU time (``process_time``, the slowest rank): on a
shared machine the CPU-time ratio is the steadier figure. Memory is
the sum over ranks of the peak resident set (``getrusage``), per grid point,
raw and net of a 16^3 run of the same model and rank count (interpreter and
libraries). ``--tracers 0 1 2`` repeats each case with that many passive tracers
(Sc 1, 2, ...; docs/equations.md#tracers); the tracers table then gives, per case,
the step/floor ratio beside the one without tracers (same launch order) and the
memory each tracer adds, ``(peak(k) - peak(0)) / (k N^3)``.
"""
from __future__ import annotations

import argparse
import json
import os
import resource
import statistics
import subprocess
import sys
import time

from shearmix.solver.compute.options import PRODUCT_PASSES


def _case(model: str, n: int, steps: int, threads: int = 1, product_pass: str = "auto",
          tracers: int = 0):
    from shearmix.solver.case import case_from_dict
    params = {"lowpe": {"Re": 400.0, "BPe": 1.0},
              "boussinesq": {"Re": 400.0, "B": 1.0, "Pr": 1.0}}[model]
    extra = {"tracers": {f"c{i}": {"Sc": 1.0 + i} for i in range(tracers)}} if tracers else {}
    return case_from_dict({**extra,
        "name": f"bench-{model}-{n}", "model": model, "parameters": params,
        "grid": {"Nx": n, "Ny": n, "Nz": n},
        "box": {"Lx": "4*pi", "Ly": "2*pi", "Lz": "2*pi"},
        "time": {"max_steps": steps, "dt": 1e-3, "adaptive": False},
        "initial": {"kind": "laminar_noise", "amplitude": 0.1},
        "compute": {"fftw_effort": "measure", "threads": threads,
                    "product_pass": product_pass},
    })


def worker(model: str, n: int, steps: int, threads: int = 1, diag_every: int = 0,
           product_pass: str = "auto", tracers: int = 0) -> dict | None:
    """Measure inside one MPI job; returns the record on rank 0.

    ``diag_every > 0`` computes the diagnostics and appends them to a time-series
    file after every other step (as a run recording every step does), and times
    the steps in between without them, so both medians come from one process.
    """
    from shearmix.solver.compute.parallel import world
    from shearmix.solver.run.simulation import Simulation
    comm = world()
    t0 = time.perf_counter()
    sim = Simulation(_case(model, n, steps, threads, product_pass, tracers), comm)
    series = None
    if diag_every:
        import tempfile

        from shearmix.solver.run.outputs import TimeSeriesOutput
        folder = comm.bcast(tempfile.mkdtemp(prefix="shearmix-bench-") if comm.rank == 0
                            else None)
        series = TimeSeriesOutput(diag_every)
        series.open(sim, folder, append=False)
    setup = comm.max(time.perf_counter() - t0)
    t0 = time.perf_counter()
    sim.advance()
    first = comm.max(time.perf_counter() - t0)
    sim.advance()
    # transforms per step, counted on one step
    fft, nl = sim.fft, sim.tendency
    fwd0, inv0, band0, trips0 = (fft.count_forward, fft.count_inverse, fft.count_forward_band,
                                 fft.count_round_trips)
    sim.advance()
    n_fwd = fft.count_forward - fwd0
    n_inv = fft.count_inverse - inv0
    n_band = fft.count_forward_band - band0  # of n_fwd, pruned to the dealiased band
    n_trips = fft.count_round_trips - trips0
    # the floor uses the step's own arrays in the step's order, so that it pays
    # the same cache misses as the step
    if n_trips:
        # block-wise pass: the same round trips without the products
        m, k = n_inv // n_trips, n_fwd // n_trips
        if (m * n_trips, k * n_trips, n_band) != (n_inv, n_fwd, n_fwd):
            raise RuntimeError("a step mixed round trips and plain transforms")

        # as in the step: the x-FFTs by chunks of rows, made and handed on by
        # nothing here (the buffers hold the last chunks' modes: finite numbers)
        trip = nl.products_pass.trip

        def pass_on(*chunks_and_rows):
            pass

        def transforms_alone():
            for _ in range(n_trips):
                trip(nl.P[:m], nl.P[:k], pass_on, pass_on, pass_on)
    else:
        # whole-array pass: inverse into its physical fields, forward from them
        # into its spectral arrays
        fields = nl.products_pass.fields

        def transforms_alone():
            for i in range(n_inv):
                fft.inverse(nl.scratch, fields[i % len(fields)])
            for i in range(n_fwd):
                (fft.forward_band if i < n_band else fft.forward)(fields[i % len(fields)],
                                                                  nl.P[i % len(nl.P)])

    # steps and floors alternate, so that a change in the machine's load during
    # the run weighs on both medians alike (the machine may be shared)
    times, cpu, floor, floor_cpu = [], [], [], []
    plain_cpu = []  # with diagnostics: the same steps without them, interleaved
    for i in range(steps if series is None else 2 * steps):
        record = series is not None and i % 2 == 0
        comm.barrier()
        t0, c0 = time.perf_counter(), time.process_time()
        sim.advance()
        if record:
            series.write(sim)  # diagnostics and the HDF5 record, as in a run
        if series is not None and not record:
            plain_cpu.append(comm.max(time.process_time() - c0))
            continue
        cpu.append(comm.max(time.process_time() - c0))
        times.append(comm.max(time.perf_counter() - t0))
        comm.barrier()
        t0, c0 = time.perf_counter(), time.process_time()
        transforms_alone()
        floor_cpu.append(comm.max(time.process_time() - c0))
        floor.append(comm.max(time.perf_counter() - t0))
    rss = comm.sum(resource.getrusage(resource.RUSAGE_SELF).ru_maxrss * 1024.0)
    if comm.rank != 0:
        return None
    step = statistics.median(times)
    fl = statistics.median(floor)
    step_cpu = statistics.median(cpu)
    fl_cpu = statistics.median(floor_cpu)
    extra = {}
    if plain_cpu:
        extra["step_cpu_seconds_without_diagnostics"] = statistics.median(plain_cpu)
    return {**extra, "model": model, "n": n, "ranks": comm.size, "threads": threads,
            "tracers": tracers,
            "diagnostics_every": diag_every, "step_seconds": step,
            "floor_seconds": fl, "ratio": step / fl, "step_cpu_seconds": step_cpu,
            "floor_cpu_seconds": fl_cpu, "ratio_cpu": step_cpu / fl_cpu,
            "transforms_per_step": n_fwd + n_inv,
            "product_pass": "blocks" if n_trips else "whole",
            "first_step_seconds": first, "setup_seconds": setup,
            "peak_rss_bytes": rss, "bytes_per_point": rss / n ** 3}


def passes_worker(model: str, n: int, steps: int) -> dict | None:
    """The block-wise and the whole-array product pass in one process, their
    steps alternating (so a change of the machine's load weighs on both)."""
    from shearmix.solver.compute.parallel import world
    from shearmix.solver.run.simulation import Simulation
    comm = world()
    sims = {}
    for kind in ("whole", "blocks"):
        sims[kind] = Simulation(_case(model, n, steps, product_pass=kind), comm)
    times = _alternating_steps(sims, steps, comm)
    if comm.rank != 0:
        return None
    whole, blocks = times["whole"], times["blocks"]
    return {"model": model, "n": n, "ranks": comm.size, "whole_seconds": whole,
            "blocks_seconds": blocks, "blocks_vs_whole": blocks / whole}


def _alternating_steps(sims: dict, steps: int, comm) -> dict:
    """Median step time of each simulation, their steps taken in turn (so that a
    change of the machine's load weighs on all alike), after two warm-up steps."""
    for sim in sims.values():
        sim.advance()
        sim.advance()
    times = {kind: [] for kind in sims}
    for _ in range(steps):
        for kind, sim in sims.items():
            comm.barrier()
            t0 = time.perf_counter()
            sim.advance()
            times[kind].append(comm.max(time.perf_counter() - t0))
    return {kind: statistics.median(t) for kind, t in times.items()}


def phases_worker(model: str, n: int, steps: int, product_pass: str = "auto",
                  tracers: int = 0) -> dict | None:
    """Where a step's time goes, rank by rank: a :class:`shearmix.solver.compute.phaseclock.PhaseClock`
    on the transform laps each phase; what is left of the step (stage updates,
    implicit solves, forcing) is "rest". Milliseconds per step, mean over ``steps``."""
    from shearmix.solver.compute.parallel import world
    from shearmix.solver.compute.phaseclock import PhaseClock
    from shearmix.solver.run.simulation import Simulation
    comm = world()
    sim = Simulation(_case(model, n, steps, product_pass=product_pass, tracers=tracers), comm)
    sim.advance()
    sim.advance()
    clock = sim.fft.clock = PhaseClock()
    total = 0.0
    for _ in range(steps):
        comm.barrier()
        t0 = time.perf_counter()
        sim.advance()
        total += time.perf_counter() - t0
    sim.fft.clock = None
    ms = {phase: 1e3 * t / steps for phase, t in clock.totals.items()}
    ms["rest"] = 1e3 * total / steps - sum(ms.values())
    ms["step"] = 1e3 * total / steps
    per_rank = comm.gather(ms)
    work = comm.gather({phase: w / steps for phase, w in clock.work.items()})
    if comm.rank != 0:
        return None
    return {"model": model, "n": n, "ranks": comm.size, "steps": steps, "tracers": tracers,
            "product_pass": "blocks" if sim.tendency.blocks else "whole",
            "ms_per_step": per_rank, "work_per_step": work}


def phases_table(records: list[dict]) -> list[str]:
    """Text rows: one per phase, one column per (model, ranks, rank); the last
    column of a 2-rank record also gives the slowest rank against 1 rank."""
    from shearmix.solver.compute.phaseclock import PHASES
    names = [p for p in PHASES + ("rest", "step")
             if any(p in ms for r in records for ms in r["ms_per_step"])]
    heads, cols = [], []

    def name(r):  # the model, and '+kc' with k tracers
        return r["model"][:5] + (f"+{r['tracers']}c" if r.get("tracers") else "")
    for r in records:
        for k, ms in enumerate(r["ms_per_step"]):
            heads.append(f"{name(r)} {r['ranks']}r" + (f"#{k}" if r["ranks"] > 1 else ""))
            cols.append(ms)
    one = {name(r): r["ms_per_step"][0] for r in records if r["ranks"] == 1}
    two = {name(r): r["ms_per_step"] for r in records if r["ranks"] == 2}
    ratio_heads = [f"{m} 2/1" for m in two if m in one]
    width = max([12] + [len(h) + 2 for h in heads + ratio_heads])
    lines = [f"{'ms per step':24s}" + "".join(f"{h:>{width}s}" for h in heads + ratio_heads)]
    for p in names:
        row = f"{p:24s}" + "".join(f"{c.get(p, 0.0):{width}.1f}" for c in cols)
        for m in two:
            if m in one:
                slowest = max(ms.get(p, 0.0) for ms in two[m])
                base = one[m].get(p, 0.0)
                # a phase that is next to nothing on one rank (the waits) has no ratio
                row += (f"{slowest / base:{width}.2f}" if base > 0.01 * one[m]["step"]
                        else f"{'-':>{width}s}")
        lines.append(row)
    return lines + work_rows(records, width)


def work_rows(records: list[dict], width: int = 12) -> list[str]:
    """Text rows: each rank's share of the one-rank work of the counted phases
    (the round trip's transforms), in the columns of :func:`phases_table`. On
    P ranks each share should be near 1/P and the shares add up to 1: a phase
    that is slow per unit of work shows in the times, one that does too much
    work shows here. Empty when the records hold no counts."""
    def name(r):
        return (r["model"], r.get("tracers", 0))
    one = {name(r): (r.get("work_per_step") or [{}])[0] for r in records
           if r["ranks"] == 1}
    names = [p for p in ("x inverse", "yz inverse", "yz forward", "x forward")
             if any(p in w for w in one.values())]
    if not names:
        return []
    lines = ["work against 1 rank"]
    for p in names:
        row = f"{'  ' + p:24s}"
        for r in records:
            base = one.get(name(r), {}).get(p, 0)
            for w in r.get("work_per_step") or [{} for _ in r["ms_per_step"]]:
                row += f"{w.get(p, 0) / base:{width}.2f}" if base else f"{'-':>{width}s}"
        lines.append(row)
    return lines


def _mpiexec() -> str:
    here = os.path.join(os.path.dirname(sys.executable), "mpiexec")
    return here if os.path.exists(here) else "mpiexec"


def launch(model: str, n: int, ranks: int, steps: int, threads: int = 1,
           diag_every: int = 0, worker: str = "--worker", product_pass: str = "auto",
           tracers: int = 0) -> dict:
    env = dict(os.environ, OMP_NUM_THREADS=str(threads))
    cmd = [_mpiexec(), "-n", str(ranks), sys.executable, os.path.abspath(__file__),
           worker, model, str(n), str(steps), str(threads), str(diag_every), product_pass,
           str(tracers)]
    res = subprocess.run(cmd, capture_output=True, text=True, env=env)
    if res.returncode != 0:
        raise RuntimeError(f"benchmark job {model} {n}^3 on {ranks} ranks, {tracers} tracer(s) "
                           "failed:\n"
                           + res.stderr[-2000:])
    return json.loads(res.stdout.strip().splitlines()[-1])


def combine(runs: list[dict]) -> dict:
    """One record from repeated launches: medians of the timings, the largest memory."""
    out = dict(runs[0])
    for key in ("step_seconds", "floor_seconds", "ratio", "step_cpu_seconds",
                "floor_cpu_seconds", "ratio_cpu", "first_step_seconds", "setup_seconds"):
        out[key] = statistics.median(r[key] for r in runs)
    for key in ("peak_rss_bytes", "bytes_per_point"):
        out[key] = max(r[key] for r in runs)
    out["repeats"] = len(runs)
    out["ratio_runs"] = [r["ratio"] for r in runs]
    return out


def _against_no_tracers(r: dict, with_k: list, without: list, k: int, n: int) -> None:
    """Into record ``r`` (``k`` tracers): its step/floor ratio over the one without
    tracers and the step time over that one's, each repeat paired with the launch
    without tracers of the same repeat, and the peak memory each tracer adds per grid
    point, ``(peak(k) - peak(0)) / (k N^3)`` (largest peaks of the repeats)."""
    ratios = [x["ratio"] / y["ratio"] for x, y in zip(with_k, without)]
    steps = [x["step_seconds"] / y["step_seconds"] for x, y in zip(with_k, without)]
    r["ratio_vs_no_tracers"] = statistics.median(ratios)
    r["ratio_vs_no_tracers_runs"] = ratios
    r["step_vs_no_tracers"] = statistics.median(steps)
    r["bytes_per_point_per_tracer"] = (max(x["peak_rss_bytes"] for x in with_k)
                                       - max(y["peak_rss_bytes"] for y in without)) / (k * n ** 3)


def machine() -> str:
    cpu = "unknown CPU"
    try:
        with open("/proc/cpuinfo") as fh:
            for line in fh:
                if line.startswith("model name"):
                    cpu = line.split(":", 1)[1].strip()
                    break
    except OSError:
        pass
    return f"{cpu}, {os.cpu_count()} cores"


def markdown(report: dict) -> str:
    """The performance tables of docs/performance.md from a ``--json`` report."""
    # the tracers column only when some record has tracers (older reports have none)
    tracers = any(r.get("tracers", 0) for r in report["records"])
    lines = [f"shearmix {report['version']} on {report['machine']}.", "",
             "| model | grid | ranks | " + ("tracers | " if tracers else "") + "s/step | floor s "
             "| ratio | cpu ratio | FFTs/step | 1st step s | B/pt net | products |",
             "|---|---|---|" + ("---|" if tracers else "") + "---|---|---|---|---|---|---|---|"]
    for r in report["records"]:
        lines.append(f"| {r['model']} | {r['n']}^3 | {r['ranks']} | "
                     + (f"{r.get('tracers', 0)} | " if tracers else "") + f"{r['step_seconds']:.4f} "
                     f"| {r['floor_seconds']:.4f} | {r['ratio']:.2f} | {r['ratio_cpu']:.2f} "
                     f"| {r['transforms_per_step']} | {r['first_step_seconds']:.2f} "
                     f"| {r['bytes_per_point_net']:.0f} "
                     f"| {r.get('product_pass', r.get('physical_pass', ''))} |")
    plain = [r for r in report["records"] if not r.get("tracers", 0)]
    one = {(r["model"], r["n"]): r for r in plain if r["ranks"] == 1}
    two = [r for r in plain if r["ranks"] == 2 and (r["model"], r["n"]) in one]
    with_tracers = [r for r in report["records"] if "ratio_vs_no_tracers" in r]
    if with_tracers:
        lines += ["", "| model | grid | ranks | tracers | step/floor | step/floor over no tracers "
                  "| over the repeats | step time over no tracers | B/pt per tracer |",
                  "|---|---|---|---|---|---|---|---|---|"]
        for r in with_tracers:
            spread = r.get("ratio_vs_no_tracers_runs", [r["ratio_vs_no_tracers"]])
            lines.append(f"| {r['model']} | {r['n']}^3 | {r['ranks']} | {r['tracers']} "
                         f"| {r['ratio']:.2f} | {r['ratio_vs_no_tracers']:.3f} "
                         f"| {min(spread):.3f} - {max(spread):.3f} "
                         f"| {r['step_vs_no_tracers']:.2f} "
                         f"| {r['bytes_per_point_per_tracer']:.0f} |")
    if two:
        lines += ["", "| model | grid | 2-rank / 1-rank step time | over the repeats |",
                  "|---|---|---|---|"]
        for r in two:
            ratio = r.get("step_vs_fewest_ranks",
                          r["step_seconds"] / one[(r["model"], r["n"])]["step_seconds"])
            spread = r.get("step_vs_fewest_ranks_runs", [ratio])
            lines.append(f"| {r['model']} | {r['n']}^3 | {ratio:.2f} "
                         f"| {min(spread):.2f} - {max(spread):.2f} |")
    extras = report.get("extras", {})
    diag = [(k.split("_", 1)[1], v) for k, v in extras.items() if k.startswith("diagnostics_")]
    if diag:
        lines += [""] + [f"- diagnostics every step vs every 100 steps, {m} "
                         f"{v['record']['n']}^3: {100 * (v['slowdown'] - 1):+.1f}%"
                         for m, v in diag]
    thr = [(k.split("_", 1)[1], v) for k, v in extras.items() if k.startswith("threads_")]
    if thr:
        lines += [""] + [f"- {m} {v['1x1']['n']}^3: 1 rank x 1 thread "
                         f"{v['1x1']['step_seconds']:.3f} s, 1 rank x 2 threads "
                         f"{v['1x2']['step_seconds']:.3f} s, 2 ranks x 1 thread "
                         f"{v['2x1']['step_seconds']:.3f} s" for m, v in thr]
    phases = [v for k, v in extras.items() if k.startswith("phases_")]
    if phases:
        lines += ["", f"Where a step's time goes at {phases[0]['n']}^3, ms per step "
                  "(`--phases`; '#k' is rank k, '2/1' the slowest rank of 2 against 1 rank):",
                  "", "```", *phases_table(phases), "```"]
    passes = [v for k, v in extras.items() if k.startswith("passes_")]
    if passes:
        lines += [""] + [f"- {v['model']} {v['n']}^3, {v['ranks']} rank(s): block-wise "
                         f"{v['blocks_seconds']:.3f} s, whole-array {v['whole_seconds']:.3f} s "
                         f"per step ({v['blocks_vs_whole']:.2f})" for v in passes]
    return "\n".join(lines) + "\n"


def _compare(args, extras: dict, kind: str, n: int, rank_counts, title: str, describe) -> None:
    """An A/B in one process per model and rank count (``--KIND-worker``); records
    go to ``extras['KIND_MODEL_RANKS']``."""
    print(f"\n{title} at {n}^3 (one process, steps alternating):")
    for model in args.models:
        for ranks in rank_counts:
            r = launch(model, n, ranks, args.steps, worker=f"--{kind}-worker")  # both passes
            extras[f"{kind}_{model}_{ranks}"] = r
            print(f"  {model:11s} {ranks} rank(s): {describe(r)}")


def main(argv=None) -> int:
    ap = argparse.ArgumentParser(prog="scripts/bench", description=__doc__.splitlines()[0])
    ap.add_argument("--sizes", type=int, nargs="+", default=[64, 128])
    ap.add_argument("--ranks", type=int, nargs="+", default=[1, 2])
    ap.add_argument("--models", nargs="+", default=["lowpe", "boussinesq"],
                    choices=["lowpe", "boussinesq"])
    ap.add_argument("--tracers", type=int, nargs="+", default=[0],
                    help="passive-tracer counts of each case (e.g. 0 1 2; the tracers table "
                         "compares each with 0 when 0 is among them)")
    ap.add_argument("--steps", type=int, default=15, help="timed steps per case (median)")
    ap.add_argument("--repeats", type=int, default=1,
                    help="launches per case, rank counts taking turns (medians over them)")
    ap.add_argument("--json", metavar="FILE", help="also write the records as JSON")
    ap.add_argument("--diagnostics", action="store_true",
                    help="also compare diagnostics every step with every 100 steps (largest size)")
    ap.add_argument("--threads", action="store_true",
                    help="also compare 1 rank x 2 FFTW threads with 2 ranks x 1 thread (largest size)")
    ap.add_argument("--markdown", metavar="JSON",
                    help="print the docs/performance.md tables of an earlier --json report, run nothing")
    ap.add_argument("--passes", action="store_true",
                    help="also compare the block-wise and the whole-array product pass in "
                         "one process per rank count (128^3, or the largest size below it)")
    ap.add_argument("--phases", action="store_true",
                    help="also time each phase of the step, rank by rank, at the "
                         "largest size (where the time goes)")
    ap.add_argument("--product-pass", choices=PRODUCT_PASSES, default="auto",
                    help="how the products are made in the timed runs (compute.product_pass)")
    ap.add_argument("--phases-worker", nargs=7, help=argparse.SUPPRESS)
    ap.add_argument("--worker", nargs=7, help=argparse.SUPPRESS)
    ap.add_argument("--passes-worker", nargs=7, help=argparse.SUPPRESS)
    args = ap.parse_args(argv)
    if args.markdown:
        with open(args.markdown) as fh:
            print(markdown(json.load(fh)), end="")
        return 0
    # inside an MPI job launched by launch(): one worker, its record on rank 0
    jobs = {"worker": lambda w: worker(w[0], int(w[1]), int(w[2]), int(w[3]), int(w[4]), w[5],
                                       int(w[6])),
            "passes_worker": lambda w: passes_worker(w[0], int(w[1]), int(w[2])),
            "phases_worker": lambda w: phases_worker(w[0], int(w[1]), int(w[2]), w[5],
                                                     int(w[6]))}
    for name, job in jobs.items():
        if getattr(args, name):
            rec = job(getattr(args, name))
            if rec is not None:
                print(json.dumps(rec))
            return 0
    from shearmix.solver.version import __version__
    records = []
    print(f"shearmix {__version__} benchmark on {machine()}")
    print(f"{'model':11s} {'grid':>6s} {'ranks':>5s} {'tr':>3s} {'s/step':>9s} {'floor s':>9s} "
          f"{'ratio':>6s} {'cpu ratio':>9s} {'FFTs':>5s} {'1st step':>8s} {'B/pt raw':>9s} "
          f"{'B/pt net':>9s} products")
    for model in args.models:
        base = {ranks: launch(model, 16, ranks, 3, product_pass=args.product_pass)
                ["peak_rss_bytes"] for ranks in args.ranks}
        for n in args.sizes:
            # the rank counts and tracer counts take turns, repeat after repeat, so
            # that a change of the machine's load falls on all of them (the machine
            # may be shared)
            runs = {(k, ranks): [] for k in args.tracers for ranks in args.ranks}
            for _ in range(args.repeats):
                for k in args.tracers:
                    for ranks in args.ranks:
                        runs[k, ranks].append(launch(model, n, ranks, args.steps,
                                                     product_pass=args.product_pass,
                                                     tracers=k))
            for k in args.tracers:
                for ranks in args.ranks:
                    r = combine(runs[k, ranks])
                    r["bytes_per_point_net"] = (r["peak_rss_bytes"] - base[ranks]) / n ** 3
                    if ranks != args.ranks[0]:
                        # paired: each repeat's run against the first rank count's run of
                        # the same repeat, which ran just before it
                        pairs = [x["step_seconds"] / y["step_seconds"]
                                 for x, y in zip(runs[k, ranks], runs[k, args.ranks[0]])]
                        r["step_vs_fewest_ranks"] = statistics.median(pairs)
                        r["step_vs_fewest_ranks_runs"] = pairs
                    if k and 0 in args.tracers:
                        _against_no_tracers(r, runs[k, ranks], runs[0, ranks], k, n)
                    records.append(r)
                    print(f"{model:11s} {n:>4d}^3 {ranks:5d} {k:3d} {r['step_seconds']:9.4f} "
                          f"{r['floor_seconds']:9.4f} {r['ratio']:6.2f} {r['ratio_cpu']:9.2f} "
                          f"{r['transforms_per_step']:5d} {r['first_step_seconds']:8.3f} "
                          f"{r['bytes_per_point']:9.0f} {r['bytes_per_point_net']:9.0f} "
                          f"{r['product_pass']}", flush=True)
    extras = {}
    big = max(args.sizes)
    if args.diagnostics:
        print(f"\ndiagnostics cost at {big}^3, 1 rank (CPU-time medians):")
        for model in args.models:
            r = launch(model, big, 1, args.steps, diag_every=1)
            with_d = r["step_cpu_seconds"]
            without = r["step_cpu_seconds_without_diagnostics"]
            # every 100 steps adds a hundredth of the per-record cost
            rare = without + (with_d - without) / 100
            ratio = with_d / rare
            extras[f"diagnostics_{model}"] = {"record": r, "every_step": with_d,
                                              "every_100": rare, "slowdown": ratio}
            print(f"  {model:11s} step with a record {with_d:.4f} s, without {without:.4f} s; "
                  f"every step vs every 100 steps: {100 * (ratio - 1):+.1f}%")
    if args.threads:
        print(f"\nthreads against ranks at {big}^3 on 2 cores (wall-clock medians):")
        for model in args.models:
            thr = launch(model, big, 1, args.steps, threads=2)
            rk = launch(model, big, 2, args.steps)
            one = launch(model, big, 1, args.steps)
            extras[f"threads_{model}"] = {"1x1": one, "1x2": thr, "2x1": rk}
            print(f"  {model:11s} 1 rank x 1 thread {one['step_seconds']:.4f} s, "
                  f"1 rank x 2 threads {thr['step_seconds']:.4f} s, "
                  f"2 ranks x 1 thread {rk['step_seconds']:.4f} s")
    if args.passes:
        _compare(args, extras, "passes", max([s for s in args.sizes if s <= 128]
                                              or [min(args.sizes)]), args.ranks,
                 "block-wise against whole-array products",
                 lambda r: f"whole {r['whole_seconds']:.4f} s, blocks {r['blocks_seconds']:.4f} s, "
                           f"ratio {r['blocks_vs_whole']:.3f}")
    if args.phases:
        n = max(args.sizes)
        print(f"\nwhere a step's time goes at {n}^3 (ms per step, mean of {args.steps} steps; "
              "'rest' is the stage updates and implicit solves):")
        recs = []
        for model in args.models:
            for k in args.tracers:
                for ranks in args.ranks:
                    r = launch(model, n, ranks, args.steps, worker="--phases-worker",
                               product_pass=args.product_pass, tracers=k)
                    extras[f"phases_{model}_{ranks}" + (f"_{k}tracers" if k else "")] = r
                    recs.append(r)
        print("\n".join(phases_table(recs)))
    if args.json:
        with open(args.json, "w") as fh:
            json.dump({"version": __version__, "machine": machine(), "records": records,
                       "extras": extras}, fh, indent=1)
    return 0


if __name__ == "__main__":
    sys.exit(main())
