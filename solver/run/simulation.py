"""A simulation: case -> grid, transforms, model, stepper and state; the time loop.

``Simulation(case)`` builds everything (collective under MPI). ``advance(dt)``
takes one step; ``run()`` steps until a stop condition, writing the time
series and printing progress on rank 0.

Exit codes of ``run`` (and of ``shearmix run``): 0 finished, 2 bad input,
3 blow-up (NaN or time-step collapse), 4 stopped early on the wall-clock
budget or on SIGTERM/SIGUSR1, after writing a checkpoint (restart from it),
5 a checkpoint or snapshot could not be written (the run stopped; the last
complete checkpoint is intact). See docs/checkpoints.md.
"""
from __future__ import annotations

import math
import os
import time
from typing import NamedTuple

import numpy as np
import pyfftw

from shearmix.solver.case import Case
from shearmix.solver.compute import kernels
from shearmix.solver.compute.options import ComputeOptions
from shearmix.solver.compute.parallel import world
from shearmix.solver.compute.transforms import SlabTransform, load_wisdom, save_wisdom
from shearmix.solver.files.slabfile import WriteFailed
from shearmix.solver.grid import Grid
from shearmix.solver.physics import diagnostics as diag
from shearmix.solver.physics.basis import CrayaHerring
from shearmix.solver.physics.basis import vectors as frame_vectors
from shearmix.solver.physics.initial import apply_initial, apply_tracer_initial
from shearmix.solver.physics.models import Model, model_for
from shearmix.solver.physics.tendency import PseudoSpectralTendency
from shearmix.solver.run import rundir
from shearmix.solver.run.imex import TABLEAUX, make_stepper
from shearmix.solver.run.outputs import TimeSeriesOutput
from shearmix.solver.run.stopsignals import StopRequests, signal_name
from shearmix.solver.run.stepview import Parameters, StepView, step_view
from shearmix.solver.run.timestep import TimeStepControl

EXIT_FINISHED, EXIT_BAD_INPUT, EXIT_BLOWUP, EXIT_STOPPED_EARLY = 0, 2, 3, 4
EXIT_WRITE_FAILED = 5


class RunLimits(NamedTuple):
    """When a run stops (``time.t_end``, ``time.max_steps``, ``time.wall_hours``, any
    of them None) and how often it prints progress; read once from the case."""

    t_end: float | None
    max_steps: int | None
    wall_hours: float | None
    progress_every: int

    @classmethod
    def from_case(cls, case) -> "RunLimits":
        return cls(case.get("time.t_end"), case.get("time.max_steps"),
                   case.get("time.wall_hours"), int(case.get("output.progress_every")))


class BlowUp(RuntimeError):
    """The run diverged: the message says when, which quantity and what to change."""


def default_threads(case: Case, comm) -> int:
    """FFTW threads per rank: ``compute.threads``, else ``OMP_NUM_THREADS``, else the
    cores this process may use shared among the ranks on its node.

    Filling the node is the default because, on one node, FFTW threads did
    about as well as ranks (docs/performance.md); ``mpiexec -n <cores>`` gives
    one thread per rank, a single process all cores.
    """
    t = case.get("compute.threads")
    if t:
        return int(t)
    env = os.environ.get("OMP_NUM_THREADS", "").strip()
    if env:
        try:
            return max(1, int(env))
        except ValueError:
            pass
    try:
        cores = len(os.sched_getaffinity(0))
    except (AttributeError, OSError):
        cores = os.cpu_count() or 1
    return max(1, cores // comm.ranks_on_node())


class Simulation:
    """State and machinery of one run.

    Parameters
    ----------
    case : validated :class:`shearmix.solver.case.Case`
    comm : communicator (default: MPI world, or serial)
    model : override the case's model (tests build reduced models this way)
    initial : apply the case's initial state (default True)
    options : how to compute (default: from the case's ``compute.*`` keys)
    """

    def __init__(self, case: Case, comm=None, model: Model | None = None, initial: bool = True,
                 options: ComputeOptions | None = None):
        self.case = case
        self.options = options if options is not None else ComputeOptions.from_case(case)
        kernels.set_backend(self.options.kernels)
        self.comm = comm if comm is not None else world()
        self.grid = Grid(case.shape, case.lengths, self.comm.rank, self.comm.size)
        load_wisdom(self.options.wisdom, self.comm)
        self.fft = SlabTransform(self.grid, self.comm,
                                 threads=default_threads(case, self.comm),
                                 effort=self.options.fftw_effort,
                                 transpose=self.options.transpose)
        save_wisdom(self.options.wisdom, self.comm)
        self.basis = CrayaHerring(self.grid)
        self.model = model if model is not None else model_for(case)
        self.fields = self.model.fields
        self.operator = self.model.operator(self.grid, self.basis)
        if kernels.use_numba():
            self.operator.prepare()
        self.tendency = PseudoSpectralTendency(self.grid, self.basis, self.fft, self.fields,
                                               self.model.advection, self.model.forcing,
                                               product_pass=self.options.product_pass)
        self.state = pyfftw.empty_aligned((len(self.fields),) + self.grid.spectral_shape,
                                          dtype=np.complex128)
        # invariant: zero outside the 2/3-rule band (every way in - set_physical,
        # a restart - truncates; the compiled kernels rely on it and skip those modes)
        self.state[...] = 0
        self.tableau = TABLEAUX[case.get("time.scheme")]
        self.stepper = make_stepper(self.tableau, self.tendency, self.operator, self.state)
        # the first-stage tendency goes straight into the stepper's register when it has one
        self._n0 = getattr(self.stepper, "tendency", None)
        if self._n0 is None:
            self._n0 = np.empty_like(self.state)
        # only the tendency writes that array: its zeros outside the band need
        # writing once, not every evaluation
        self.tendency.owned_output = self._n0
        kernels.warm_up()
        self.t = 0.0
        self.step_count = 0
        self.dt = float(case.get("time.dt"))
        self.control = TimeStepControl.from_case(case)
        self.limits = RunLimits.from_case(case)
        self.adaptive = self.control.adaptive
        self.params = Parameters.from_case(case)
        # set by a restart, else by the run folder's start (rundir.start) or step_view
        self.history = None
        if initial:
            # the product buffers hold nothing between tendency evaluations:
            # lent as work arrays, so the initial state makes no full-size temporaries
            apply_initial(self, work=self.tendency.P)
            for tracer in case.tracers:
                apply_tracer_initial(self, tracer)

    # ------------------------------------------------------------ state in and out
    def set_physical(self, u, v, w, T=None) -> None:
        """Set the state from local physical slabs (velocity projected to divergence free).

        A component given as ``None`` is zero. The tendency's work arrays are used,
        so no full-size temporary is made.
        """
        fft, nl = self.fft, self.tendency
        comps = nl.P[:3]
        for f, spec in zip((u, v, w), comps):
            if f is None:
                spec[...] = 0
                continue
            np.copyto(nl.product, f)
            fft.forward(nl.product, spec)
            nl.dealias_normalise(spec)
        self.basis.project(*comps, self.state[0], self.state[1])
        self.state[0] *= self.basis.nonzero
        self.state[1] *= self.basis.nonzero
        if "T" in self.fields:
            if T is None:
                self.state[2] = 0
            else:
                np.copyto(nl.product, T)
                fft.forward(nl.product, self.state[2])
                nl.dealias_normalise(self.state[2])
                self.state[2] *= self.basis.nonzero

    def set_scalar_physical(self, name: str, field) -> None:
        """Set the scalar state field ``name`` (``T`` or a tracer's ``c.NAME``) from its
        local physical slab (dealiased; zero mean, which the equations do not carry)."""
        fft, nl = self.fft, self.tendency
        i = self.fields.index(name)
        np.copyto(nl.product, field)
        fft.forward(nl.product, self.state[i])
        nl.dealias_normalise(self.state[i])
        self.state[i] *= self.basis.nonzero

    def physical(self):
        """Local physical slabs ``(u, v, w, T or None)`` of the current state (copies)."""
        return self.tendency.physical_fields(self.state)

    def _inverse(self, spec):
        work = self.fft.empty_spectral()
        work[...] = spec
        return self.fft.inverse(work, self.fft.empty_physical())

    def view(self) -> StepView:
        """The read-only view of the current step boundary that outputs receive."""
        state = self.state.view()
        state.flags.writeable = False
        return StepView(t=self.t, step_count=self.step_count, dt=self.dt, state=state,
                        max_speed=self.tendency.max_speed, history=self.history,
                        grid=self.grid, comm=self.comm,
                        basis=self.basis, fields=self.fields, params=self.params,
                        forcing=self.tendency.forcing, case=self.case,
                        to_physical=self.tendency.physical_of, inverse=self._inverse)

    def add_mode(self, nx: int, ny: int, nz: int, component: str, amplitude: float) -> None:
        """Add ``amplitude * e cos(k.x)`` with ``e`` the frame vector of ``component`` at k."""
        g = self.grid
        x, y, z = g.physical_coordinates()
        k = np.array([2 * np.pi / L * n for L, n in zip(g.lengths, (nx, ny, nz))])
        phase = np.cos(k[0] * x + k[1] * y + k[2] * z) * np.ones(g.physical_shape)
        u0, v0, w0, T0 = self.physical()
        if component == "T":
            if T0 is None:
                raise ValueError("component T needs the boussinesq model")
            T0 = T0 + amplitude * phase
        else:
            e = frame_vectors(*k)[0 if component == "vortical" else 1]
            u0 = u0 + amplitude * e[0] * phase
            v0 = v0 + amplitude * e[1] * phase
            w0 = w0 + amplitude * e[2] * phase
        self.set_physical(u0, v0, w0, T0)

    # ------------------------------------------------------------ stepping
    def _stage_zero(self, want_speed=True):
        self.tendency.want_speed = want_speed
        self.tendency(self.state, self.t, self._n0)
        self.tendency.want_speed = False
        return self._n0

    def cfl_dt(self) -> float:
        """Largest step allowed by the advective CFL number and the ceiling."""
        return self.control.cfl_step(self.tendency.cfl_rate)

    def advance(self, dt: float | None = None, t_stop: float | None = None) -> float:
        """One step: ``dt`` if given, else the controller's step; returns the step taken."""
        n0 = self._stage_zero(want_speed=True)
        self._check_finite()
        return self._step(n0, self._chosen_step() if dt is None else dt, t_stop)

    def advance_to(self, t_end: float, dt: float | None = None) -> None:
        """Step until ``t_end`` exactly (the last step shortened)."""
        while not self.control.reached(self.t, t_end):
            self.advance(dt, t_stop=t_end)

    def _check_finite(self) -> None:
        if not math.isfinite(self.tendency.cfl_rate):
            raise BlowUp(self._blowup_message("the velocity is not finite (NaN or Inf)"))

    def _chosen_step(self) -> float:
        dt = self.control.choose(self.tendency.cfl_rate, self.dt)
        if self.control.collapsed(dt):
            raise BlowUp(self._blowup_message(
                f"the CFL time step fell to {dt:.3g}, below time.dt_min = "
                f"{self.control.dt_min:g} (max |u| = {self.tendency.max_speed:.3g})"))
        return dt

    def _step(self, n0, dt: float, t_stop: float | None) -> float:
        dt, landed = self.control.land(self.t, dt, t_stop)
        self.stepper.step(self.state, self.t, dt, n0)
        self.t += dt
        self.step_count += 1
        if dt > 0 and not landed:
            self.dt = dt
        return dt

    def _blowup_message(self, what: str) -> str:
        nx, ny, nz = self.grid.shape
        return (f"blow-up at step {self.step_count}, t = {self.t:.6g}: {what}; refine the grid "
                f"(grid.Nx/Ny/Nz, now {nx} x {ny} x {nz}) or lower time.cfl "
                f"(now {self.control.cfl:g})")

    def diagnostics(self) -> dict:
        """Instantaneous diagnostics (collective); refreshes max |u| first."""
        self._stage_zero(want_speed=True)
        return diag.compute(self.view())

    # ------------------------------------------------------------ the run loop
    def default_outputs(self) -> list:
        """The outputs a case asks for: time series, spectra, snapshots, checkpoints.

        The checkpoint comes last so that what else is due at a step boundary
        is on disk before the checkpoint a restart would continue from.
        """
        from shearmix.solver.files.checkpoint import checkpoint_outputs
        from shearmix.solver.files.snapshots import snapshot_outputs
        from shearmix.solver.files.spectra import spectra_outputs
        return ([TimeSeriesOutput(int(self.case.get("output.diagnostics_every")))]
                + spectra_outputs(self.case) + snapshot_outputs(self.case)
                + checkpoint_outputs(self.case))

    def run(self, output: str | None = None, append: bool = False, log=None,
            outputs: list | None = None) -> int:
        """Step to a stop condition, writing the outputs. Returns an exit code.

        ``append`` continues the files of a run (a restart). The run-folder rules
        of :mod:`shearmix.solver.run.rundir` apply first (exit 2 if refused). SIGTERM and
        SIGUSR1 stop the run at the next step boundary, like the wall-clock
        budget; the budget stops it early enough to write the last checkpoint
        (margin: twice the longest step so far plus the last checkpoint's
        write time).
        """
        case, comm = self.case, self.comm
        out_dir = output or case.output_directory
        log = log or (lambda msg: print(msg, flush=True))
        say = log if comm.rank == 0 else (lambda msg: None)
        t_end, max_steps, wall, progress = self.limits
        self.outputs = outputs if outputs is not None else self.default_outputs()
        try:  # the run-folder rules; the history starts at the state the run starts from
            for note in rundir.start(self, out_dir, append):
                say(f"shearmix: {note}")
        except rundir.RunFolderError as exc:
            say(f"shearmix: error: {exc}")
            return EXIT_BAD_INPUT
        opened = []
        view = step_view(self)  # starts the history of a continued run that has none
        try:
            for out in self.outputs:
                out.open(view, out_dir, append)
                opened.append(out)
        except WriteFailed as exc:
            say(f"shearmix: {exc}; nothing was run")
            for out in opened:
                out.close(view, "failed")
            return EXIT_WRITE_FAILED
        series = next((o for o in self.outputs if isinstance(o, TimeSeriesOutput)), None)
        checkpoints = [o for o in self.outputs if hasattr(o, "write_seconds")]
        start_wall = time.monotonic()
        start_step, start_t = self.step_count, self.t
        last_report = (start_wall, self.step_count)
        code, reason = EXIT_FINISHED, "finished"
        say(f"shearmix: {case.name}: model {case.model}, grid {self.grid.shape}, "
            f"{comm.size} rank(s), convention {case.convention}")
        stop = StopRequests().install()
        longest, previous = 0.0, time.monotonic()
        try:
            while True:
                n0 = self._stage_zero(want_speed=True)
                self._check_finite()
                # one collective call: a signal seen by any rank, the slowest rank's clock
                signum, elapsed = comm.max(np.array([float(stop.received),
                                                     time.monotonic() - start_wall]))
                current = time.monotonic()
                longest, previous = max(longest, current - previous), current
                view = self.view()
                for out in self.outputs:
                    if out.due(view):
                        if out is not series and series is not None:
                            series.flush()  # the series reaches every file written after it
                        out.write(view)
                fresh = series is not None and series.last_step == self.step_count
                if fresh and not math.isfinite(series.last["K"]):
                    raise BlowUp(self._blowup_message("the kinetic energy is not finite"))
                if self.step_count % progress == 0:  # same steps whether or not restarted
                    now = time.monotonic()
                    rate = (self.step_count - last_report[1]) / max(now - last_report[0], 1e-9)
                    last_report = (now, self.step_count)
                    d = series.last if fresh else diag.compute(view)
                    say(self._progress_line(d, rate, start_wall, start_t, start_step))
                done = self.control.reached(self.t, t_end) or \
                       (max_steps is not None and self.step_count - start_step >= max_steps)
                if done:
                    break
                if signum:
                    say(f"shearmix: {signal_name(signum)} received: writing a checkpoint and "
                        f"stopping at step {self.step_count}, t = {self.t:.6g}")
                    code, reason = EXIT_STOPPED_EARLY, "stopped"
                    break
                margin = 2 * longest + max((o.write_seconds for o in checkpoints), default=0.0)
                if wall is not None and elapsed + margin >= wall * 3600:
                    say(f"shearmix: wall-clock budget of {wall:g} h reached at step "
                        f"{self.step_count}, t = {self.t:.6g} (margin {margin:.1f} s kept for "
                        "the last checkpoint)")
                    code, reason = EXIT_STOPPED_EARLY, "stopped"
                    break
                self._step_with(n0, t_end)
        except BlowUp as exc:
            say(f"shearmix: {exc}")
            code, reason = EXIT_BLOWUP, "blowup"
        except WriteFailed as exc:
            say(f"shearmix: {exc}; stopping: the last complete checkpoint is kept")
            code, reason = EXIT_WRITE_FAILED, "failed"
        view = self.view()
        try:
            for out in self.outputs:
                try:
                    out.close(view, reason)
                except WriteFailed as exc:
                    say(f"shearmix: {exc}; the last complete checkpoint is kept")
                    code, reason = EXIT_WRITE_FAILED, "failed"
        finally:
            stop.restore()
        if code in (EXIT_BLOWUP, EXIT_WRITE_FAILED):
            return code
        elapsed = time.monotonic() - start_wall
        say(f"shearmix: {'finished' if code == 0 else 'stopped'} at step {self.step_count}, "
            f"t = {self.t:.6g}, {elapsed:.1f} s wall; results in {out_dir}")
        return code

    def _step_with(self, n0, t_end):
        return self._step(n0, self._chosen_step(), t_end)

    def _progress_line(self, d, rate, start_wall, start_t, start_step) -> str:
        lim = self.limits
        elapsed = time.monotonic() - start_wall
        left = []
        if lim.t_end is not None and self.t > start_t and elapsed > 0:
            left.append((lim.t_end - self.t) * elapsed / (self.t - start_t))
        if lim.max_steps is not None and self.step_count > start_step:
            left.append((lim.max_steps - (self.step_count - start_step))
                        * elapsed / (self.step_count - start_step))
        if lim.wall_hours is not None:
            left.append(lim.wall_hours * 3600 - elapsed)
        remaining = _hms(min(left)) if left else "--:--:--"
        eta = d["eta"]
        return (f"step {self.step_count:7d}  t {self.t:10.4f}  dt {self.dt:9.3e}  "
                f"K {d['K']:10.4e}  eta {eta:6.3f}  {rate:7.1f} steps/s  left {remaining}")


def _hms(seconds: float) -> str:
    seconds = max(0, int(seconds))
    return f"{seconds // 3600:02d}:{seconds % 3600 // 60:02d}:{seconds % 60:02d}"
