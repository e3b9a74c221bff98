"""``shearmix stability``: linear stability of the laminar flow from the command line.

    shearmix stability point   [CASE] --kx KX [--kz KZ] [--ky0 K] [--eigenfunction F.csv]
    shearmix stability map     [CASE] --kx LO:HI:N --kz LO:HI:N [--csv F] [--png F]
    shearmix stability neutral [CASE] --vary Re|BPe|B --along kx|kz --k LO:HI:N
                               (--other K | --other-range LO:HI) [--csv F] [--png F]
    shearmix stability box     CASE [--csv F] [--png F]
    shearmix stability mode    CASE --output MODE.h5 [--index I J [L]]

Parameters come from a case file (changed with ``--set key=value``) or, with
no case, from ``--model``, ``--Re``, ``--B``, ``--Pe``/``--Pr``, ``--BPe``,
``--kf``, ``--amplitude`` (``box`` and ``mode`` need a case: the box and grid
come from it).  Numbers may be written as in case files (``1/3``, ``2*pi``).
Bad input: one line naming the option, exit 2, nothing written.
"""
from __future__ import annotations

import argparse
import math
import sys
import time

import numpy as np
import yaml

EXIT_BAD_INPUT = 2


class BadInput(ValueError):
    pass


class _OneLineParser(argparse.ArgumentParser):
    """Argument errors as one line (the option and what is allowed), not the usage text."""

    def error(self, message):
        self.exit(EXIT_BAD_INPUT, f"{self.prog}: error: {message} (see {self.prog} --help)\n")

    def parse_known_args(self, args=None, namespace=None):
        # refuse stray arguments here: the program's parser would print its usage text
        namespace, extras = super().parse_known_args(args, namespace)
        if extras:
            self.error(f"unrecognized arguments: {' '.join(extras)}")
        return namespace, extras


def _number(text: str) -> float:
    """A number written as in case files: ``0.5``, ``1e4``, ``1/3``, ``2*pi``."""
    from shearmix.solver.case import parse_length
    return parse_length(text)


# ---------------------------------------------------------------- argument types
def _range(text: str):
    """``LO:HI:N`` (N evenly spaced values) or a comma-separated list."""
    try:
        if ":" in text:
            parts = text.split(":")
            if len(parts) != 3:
                raise ValueError
            lo, hi, n = _number(parts[0]), _number(parts[1]), int(parts[2])
            if n < 1 or hi < lo or lo < 0 or not (math.isfinite(lo) and math.isfinite(hi)):
                raise ValueError
            return np.linspace(lo, hi, n) if n > 1 else np.array([lo])
        vals = np.array([_number(v) for v in text.split(",") if v.strip()])
        if vals.size == 0 or np.any(vals < 0) or not np.all(np.isfinite(vals)):
            raise ValueError
        return vals
    except ValueError:
        raise argparse.ArgumentTypeError(
            f"expected LO:HI:N (0 <= LO <= HI, N >= 1) or a list a,b,c of numbers >= 0, "
            f"got {text!r}") from None


def _interval(text: str):
    try:
        lo, hi = (_number(v) for v in text.split(":"))
        if not (0 <= lo <= hi) or not math.isfinite(hi):
            raise ValueError
        return lo, hi
    except ValueError:
        raise argparse.ArgumentTypeError(f"expected LO:HI with 0 <= LO <= HI, got {text!r}") \
            from None


def _nonneg(text: str):
    try:
        v = _number(text)
        if v < 0 or not math.isfinite(v):
            raise ValueError
        return v
    except ValueError:
        raise argparse.ArgumentTypeError(f"expected a number >= 0, got {text!r}") from None


def _positive(text: str):
    try:
        v = _number(text)
        if v <= 0 or not math.isfinite(v):
            raise ValueError
        return v
    except ValueError:
        raise argparse.ArgumentTypeError(f"expected a number > 0, got {text!r}") from None


def _harmonics(text: str):
    try:
        v = int(text)
        if v < 1:
            raise ValueError
        return v
    except ValueError:
        raise argparse.ArgumentTypeError(f"expected a whole number >= 1, got {text!r}") from None


# ---------------------------------------------------------------- parser
def _common(p, case_required=False):
    if case_required:
        p.add_argument("case", help="case file (YAML)")
    else:
        p.add_argument("case", nargs="?", help="case file (YAML); or give the parameters below")
    p.add_argument("--set", action="append", metavar="KEY=VALUE",
                   help="override a case key, e.g. --set parameters.Re=200 (repeatable)")
    # box and mode take them too, to refuse them with the same one line as the others
    g = p.add_argument_group("parameters without a case file"
                             + (" (not with this action: use --set)" if case_required else ""))
    g.add_argument("--model", choices=("boussinesq", "lowpe"))
    g.add_argument("--Re", type=_positive)
    g.add_argument("--B", type=_nonneg)
    g.add_argument("--Pe", type=_positive)
    g.add_argument("--Pr", type=_positive, help="Prandtl number, Pe = Re*Pr")
    g.add_argument("--BPe", type=_nonneg)
    g.add_argument("--kf", type=_positive, default=None, help="forcing wavenumber (default 1)")
    g.add_argument("--amplitude", default=None,
                   help="forcing amplitude: laminar (U_L = 1, default), unit (F0 = 1) or a "
                        "number F0")
    p.add_argument("--force", action="store_true", help="replace existing output files")


def add_arguments(subparsers):
    """Register ``stability`` and its actions on the program's subparsers."""
    top = subparsers.add_parser(
        "stability", help="linear stability of the laminar flow (growth rates, maps, "
                          "neutral curves, box advice, eigenmode start)",
        description="Linear stability of the laminar flow U_L sin(kf y) e_x; see docs/stability.md.")
    top.error = _OneLineParser.error.__get__(top)  # the program's parser class is not ours
    acts = top.add_subparsers(dest="stability_action", metavar="ACTION",
                              parser_class=_OneLineParser)
    acts.required = True

    p = acts.add_parser("point", help="leading eigenvalue at one (kx, kz, ky0)")
    _common(p)
    p.add_argument("--kx", type=_nonneg, required=True)
    p.add_argument("--kz", type=_nonneg, default=0.0)
    p.add_argument("--ky0", type=_nonneg, default=0.0, help="Bloch detuning in y (default 0)")
    p.add_argument("--harmonics", type=_harmonics,
                   help="fixed truncation |n| <= M (default: automatic with convergence check)")
    p.add_argument("--eigenfunction", metavar="FILE.csv",
                   help="write the eigenfunction's Fourier coefficients in y")
    p.set_defaults(func=run_point)

    p = acts.add_parser("map", help="growth-rate map over (kx, kz) and the most unstable mode")
    _common(p)
    p.add_argument("--kx", type=_range, required=True, metavar="LO:HI:N")
    p.add_argument("--kz", type=_range, default=np.array([0.0]), metavar="LO:HI:N")
    p.add_argument("--ky0", type=_nonneg, default=0.0)
    p.add_argument("--harmonics", type=_harmonics)
    p.add_argument("--csv", metavar="FILE")
    p.add_argument("--png", metavar="FILE")
    p.add_argument("--no-refine", action="store_true", help="skip refining the fastest grid point")
    p.set_defaults(func=run_map)

    p = acts.add_parser("neutral", help="neutral curve of Re, BPe or B against kx or kz")
    _common(p)
    p.add_argument("--vary", required=True, choices=("Re", "BPe", "B"))
    p.add_argument("--along", required=True, choices=("kx", "kz"))
    p.add_argument("--k", type=_range, required=True, metavar="LO:HI:N")
    g = p.add_mutually_exclusive_group(required=True)
    g.add_argument("--other", type=_nonneg, help="the other wavenumber, fixed")
    g.add_argument("--other-range", type=_interval, metavar="LO:HI",
                   help="maximise the growth rate over the other wavenumber in this interval")
    p.add_argument("--ky0", type=_nonneg, default=0.0)
    p.add_argument("--limits", type=_interval, default=(1e-4, 1e7), metavar="LO:HI",
                   help="search interval of the varied parameter (default 1e-4:1e7)")
    p.add_argument("--csv", metavar="FILE")
    p.add_argument("--png", metavar="FILE")
    p.set_defaults(func=run_neutral)

    p = acts.add_parser("box", help="unstable modes that fit a case's box, warnings, grid hint")
    _common(p, case_required=True)
    p.add_argument("--csv", metavar="FILE", help="table of every box mode computed")
    p.add_argument("--png", metavar="FILE", help="growth-rate map with the box modes marked")
    p.set_defaults(func=run_box)

    p = acts.add_parser("mode", help="write an eigenmode as a perturbation file for the engine")
    _common(p, case_required=True)
    p.add_argument("--output", "-o", required=True, metavar="MODE.h5")
    p.add_argument("--index", type=int, nargs="+", metavar="I J [L]",
                   help="box wave indices: kx = 2 pi I/Lx, kz = 2 pi J/Lz, ky0 = 2 pi L/Ly "
                        "(default: the fastest unstable box mode)")
    p.set_defaults(func=run_mode)
    return top


# ---------------------------------------------------------------- set-up
def _fail(msg: str) -> int:
    print(f"shearmix stability: error: {msg}", file=sys.stderr)
    return EXIT_BAD_INPUT


def _warn(msg: str) -> None:
    """A warning among the results (as ``box`` prints its warnings), so saved output keeps it."""
    print(f"warning: {msg}")


def edge_warnings(gm, i, j):
    """Warnings when the fastest grid point ``(i, j)`` of a map lies on an open edge of its range.

    ``kx = 0`` and ``kz = 0`` are not open edges: the growth rate is even in
    each wavenumber, so a maximum there is a true one.
    """
    out = []
    for name, k, n in (("kx", gm.kx, i), ("kz", gm.kz, j)):
        if k.size < 2:
            continue
        if n == k.size - 1 or (n == 0 and k[0] > 0):
            side = "upper" if n == k.size - 1 else "lower"
            out.append(f"the fastest grid point lies on the {side} edge of the --{name} range "
                       f"({name} = {k[n]:.6g}): the most unstable mode may lie outside it; "
                       f"widen --{name}")
    return out


def _setup(args):
    """``(params, case_or_None, case_yaml)``; BadInput on any problem."""
    from .params import FlowParams, params_from_case
    given = [n for n in ("model", "Re", "B", "Pe", "Pr", "BPe", "kf", "amplitude")
             if getattr(args, n, None) is not None]
    if args.case:
        if given:
            raise BadInput(f"--{given[0]}: with a case file change parameters with --set "
                           f"(e.g. --set parameters.Re=200), not --{given[0]}")
        from shearmix.solver.case import CaseError, load_case
        try:
            case = load_case(args.case, args.set or None)
        except CaseError as exc:
            raise BadInput(str(exc)) from None
        try:
            return params_from_case(case), case, case.to_yaml()
        except ValueError as exc:
            raise BadInput(str(exc)) from None
    if args.set:
        raise BadInput("--set: needs a case file")
    if args.model is None:
        raise BadInput("--model: give a case file or --model boussinesq|lowpe with its parameters")
    re_varied = args.Re is None
    if re_varied:
        if getattr(args, "vary", None) != "Re":
            raise BadInput("--Re: required without a case file (a number > 0)")
        args.Re = 1.0  # only where the search for the neutral Re starts
    kf = args.kf if args.kf is not None else 1.0
    amp = args.amplitude if args.amplitude is not None else "laminar"
    if amp == "laminar":
        ul, hold, f0 = 1.0, "U_L", kf * kf / args.Re
    elif amp == "unit":
        f0, hold = 1.0, "F0"
        ul = f0 * args.Re / kf ** 2
    else:
        try:
            f0 = float(amp)
            if f0 < 0 or not math.isfinite(f0):
                raise ValueError
        except ValueError:
            raise BadInput(f"--amplitude: must be laminar, unit or a number >= 0, got {amp!r}") \
                from None
        hold, ul = "F0", f0 * args.Re / kf ** 2
    raw = {"model": args.model, "parameters": {"Re": args.Re},
           "forcing": {"kf": kf, "amplitude": amp if amp in ("laminar", "unit") else f0}}
    try:
        if args.model == "boussinesq":
            if args.BPe is not None:
                raise BadInput("--BPe: the boussinesq model takes --B and --Pe (or --Pr)")
            if args.B is None or (args.Pe is None and args.Pr is None):
                raise BadInput("--B, --Pe: the boussinesq model needs --B and --Pe (or --Pr)")
            if args.Pe is not None and args.Pr is not None:
                raise BadInput("--Pr: give --Pe or --Pr, not both")
            pe = args.Pe if args.Pe is not None else args.Pr * args.Re
            raw["parameters"].update(B=args.B, Pe=pe)
            params = FlowParams("boussinesq", Re=args.Re, kf=kf, U_L=ul, B=args.B, Pe=pe,
                                hold=hold)
        else:
            for n in ("B", "Pe", "Pr"):
                if getattr(args, n) is not None:
                    raise BadInput(f"--{n}: the lowpe model takes --BPe only")
            if args.BPe is None:
                raise BadInput("--BPe: the lowpe model needs --BPe (a number >= 0)")
            raw["parameters"]["BPe"] = args.BPe
            params = FlowParams("lowpe", Re=args.Re, kf=kf, U_L=ul, BPe=args.BPe, hold=hold)
    except ValueError as exc:
        if isinstance(exc, BadInput):
            raise
        raise BadInput(str(exc)) from None
    if re_varied:
        raw["parameters"]["Re"] = "varied"
    return params, None, yaml.safe_dump(raw, sort_keys=False)


def _outputs(args, *options):
    from .tables import check_writable
    for opt in options:
        path = getattr(args, opt.lstrip("-").replace("-", "_"), None)
        if path is None:
            continue
        try:
            check_writable(path, args.force, opt)
        except ValueError as exc:
            raise BadInput(str(exc)) from None
        if opt == "--png":
            from .plots import require_matplotlib
            try:
                require_matplotlib()
            except ValueError as exc:
                raise BadInput(str(exc)) from None


def _guard(fn):
    def wrapped(args):
        try:
            return fn(args)
        except BadInput as exc:
            return _fail(str(exc))
    wrapped.__name__ = fn.__name__
    wrapped.__doc__ = fn.__doc__
    return wrapped


def _print_header(params, case, varied=None):
    print(f"# {params.describe(varied)}")
    if case is not None:
        print(f"# case: {case.source}  convention: {case.convention}")


def _cplx(s):
    return f"growth {s.real:+.8g}  frequency {abs(s.imag):.8g}"


# ---------------------------------------------------------------- actions
@_guard
def run_point(args):
    """Leading eigenvalue at one point, with the truncation report."""
    from . import eigen
    params, case, cy = _setup(args)
    _outputs(args, "--eigenfunction")
    e = eigen.solve(params, args.kx, args.kz, args.ky0, M=args.harmonics,
                    vectors=args.eigenfunction is not None)
    _print_header(params, case)
    print(f"kx={args.kx:g} kz={args.kz:g} ky0={args.ky0:g}: {_cplx(e.sigma)}")
    hist = ", ".join(f"M={m}: {s.real:+.10g}{s.imag:+.3g}i" for m, s in e.history)
    state = "converged" if e.converged else "NOT converged"
    how = f"{e.method}, fixed by --harmonics" if args.harmonics else e.method
    print(f"truncation |n| <= {e.M} ({how}), {state}; change at last step "
          f"{e.change:.2e}; history {hist}")
    if not e.converged:
        more = (f"at |n| <= {e.history[-1][0]} the eigenvalue changes by {e.change:.2e}; "
                "raise --harmonics or leave it out for the automatic truncation"
                if args.harmonics else "the largest truncation was reached")
        _warn(f"truncation |n| <= {e.M} is not converged: {more}")
    if args.eigenfunction:
        from .tables import write_csv
        op = e.operator
        u = op.velocity(e.vector)
        T = op.temperature(e.vector)
        cols = ["n", "ky", "u_re", "u_im", "v_re", "v_im", "w_re", "w_im"]
        if T is not None:
            cols += ["T_re", "T_im"]
        rows = []
        for k, n in enumerate(range(-op.M, op.M + 1)):
            r = [n, float(op.q[k])]
            for c in range(3):
                r += [float(u[k, c].real), float(u[k, c].imag)]
            if T is not None:
                r += [float(T[k].real), float(T[k].imag)]
            rows.append(r)
        write_csv(args.eigenfunction, cols, rows, "point eigenfunction", params, cy,
                  extra={"kx": args.kx, "kz": args.kz, "ky0": args.ky0,
                         "sigma": f"{e.sigma.real:.12g} {e.sigma.imag:+.12g}i",
                         "truncation": f"M={e.M}, change {e.change:.3g}"}, force=args.force)
        print(f"wrote {args.eigenfunction}")
    return 0


@_guard
def run_map(args):
    """Growth-rate map, the fastest grid point and its refinement."""
    from . import eigen, maps
    params, case, cy = _setup(args)
    _outputs(args, "--csv", "--png")
    gm = maps.growth_map(params, args.kx, args.kz, args.ky0, M=args.harmonics)
    _print_header(params, case)
    i, j = gm.argmax()
    print(f"map {gm.kx.size} x {gm.kz.size} at ky0={gm.ky0:g}, truncation |n| <= {gm.M}, "
          f"{gm.seconds:.2f} s")
    f = gm.check["fastest"]
    fixed = " (fixed by --harmonics)" if args.harmonics else ""
    print(f"fastest grid point kx={gm.kx[i]:.6g} kz={gm.kz[j]:.6g}: {_cplx(gm.sigma[i, j])}; "
          f"truncation{fixed} check M={f['M_check']}: change {f['change']:.2e}")
    tol = eigen.RTOL * eigen.rate_scale(params, gm.kx[i], gm.kz[j])
    if not f["change"] <= tol:
        _warn(f"truncation |n| <= {gm.M} is not converged at the fastest grid point: at "
              f"|n| <= {f['M_check']} its eigenvalue changes by {f['change']:.2e}"
              + ("; raise --harmonics or leave it out" if args.harmonics else ""))
    edges = edge_warnings(gm, i, j)
    for w in edges:
        _warn(w)
    opt = None
    if not args.no_refine and gm.growth[i, j] > 0:
        lo = lambda a, k: a[max(k - 1, 0)]
        hi = lambda a, k: a[min(k + 1, a.size - 1)]
        opt = maps.most_unstable(params, (lo(gm.kx, i), hi(gm.kx, i)),
                                 (lo(gm.kz, j), hi(gm.kz, j)), start=(gm.kx[i], gm.kz[j]),
                                 ky0=gm.ky0, M=gm.M)
        print(f"most unstable (refined): kx={opt.kx:.8g} kz={opt.kz:.8g}: {_cplx(opt.sigma)}; "
              f"truncation |n| <= {opt.M}, change {opt.change:.2e}")
    desc = "\n".join(_provenance("map", params, cy))
    if args.csv:
        from .tables import write_csv
        rows = [[float(a), float(c), float(gm.sigma[ii, jj].real), float(abs(gm.sigma[ii, jj].imag))]
                for ii, a in enumerate(gm.kx) for jj, c in enumerate(gm.kz)]
        extra = {"ky0": gm.ky0, "truncation": f"M={gm.M}; at fastest point M={f['M_check']} "
                 f"changes sigma by {f['change']:.3g}"}
        extra.update({f"warning{k}": w for k, w in enumerate(edges)})
        if opt is not None:
            extra["most_unstable"] = (f"kx={opt.kx:.10g} kz={opt.kz:.10g} growth={opt.growth:.10g} "
                                      f"frequency={opt.frequency:.10g}")
        write_csv(args.csv, ["kx", "kz", "growth", "frequency"], rows, "map", params, cy,
                  extra=extra, force=args.force)
        print(f"wrote {args.csv}")
    if args.png:
        from .boxfit import Box
        from .plots import growth_map_figure
        growth_map_figure(gm, args.png, desc, box=Box.from_case(case) if case else None,
                          optimum=opt)
        print(f"wrote {args.png}")
    return 0


def _provenance(what, params, cy, varied=None):
    from .tables import header_lines
    return header_lines(what, params, cy, varied=varied)


@_guard
def run_neutral(args):
    """Neutral curve."""
    from . import maps
    params, case, cy = _setup(args)
    if args.vary == "B" and params.model == "lowpe":
        raise BadInput("--vary: B is not a parameter of the lowpe model; use Re or BPe")
    _outputs(args, "--csv", "--png")
    curve = maps.neutral_curve(params, args.vary, args.along, args.k, other=args.other,
                               other_bounds=args.other_range, ky0=args.ky0, limits=args.limits)
    _print_header(params, case, args.vary)
    oname = "kz" if args.along == "kx" else "kx"
    print(f"neutral {args.vary} against {args.along} ({oname} "
          f"{'maximised over ' + str(args.other_range) if args.other is None else '= ' + format(args.other, 'g')})")
    for k, v, o in zip(curve.k, curve.value, curve.other):
        print(f"  {args.along}={k:.6g}  {args.vary}={v:.8g}" + ("" if args.other is not None
                                                                else f"  {oname}={o:.6g}")
              + ("  (no sign change within limits)" if not math.isfinite(v) else ""))
    if args.csv:
        from .tables import write_csv
        rows = [[float(k), float(v), float(o)] for k, v, o in zip(curve.k, curve.value, curve.other)]
        write_csv(args.csv, [args.along, args.vary, oname], rows, "neutral", params, cy,
                  extra={"varied": args.vary, "other": curve.other_mode, "ky0": args.ky0,
                         "limits": f"{args.limits[0]:g}:{args.limits[1]:g}"}, force=args.force,
                  varied=args.vary)
        print(f"wrote {args.csv}")
    if args.png:
        from .plots import neutral_figure
        neutral_figure(curve, args.png, "\n".join(_provenance("neutral", params, cy, args.vary)))
        print(f"wrote {args.png}")
    return 0


def _box(case):
    from .boxfit import Box
    box = Box.from_case(case)
    return box


@_guard
def run_box(args):
    """Box modes, warnings, resolution hint."""
    from . import boxfit, maps
    params, case, cy = _setup(args)
    _outputs(args, "--csv", "--png")
    box = _box(case)
    try:
        boxfit.detunings(params, box.Ly)
    except ValueError as exc:
        raise BadInput(str(exc)) from None
    t0 = time.perf_counter()
    rep = boxfit.scan(params, box)
    _print_header(params, case)
    print(f"box {box.Lx:.6g} x {box.Ly:.6g} x {box.Lz:.6g}, grid {box.Nx} x {box.Ny} x {box.Nz}: "
          f"{len(rep.modes)} modes computed ({rep.skipped['grid']} beyond the grid, pruned by "
          f"the energy bound elsewhere), {time.perf_counter() - t0:.1f} s")
    uns = rep.unstable
    print(f"{len(uns)} unstable box modes" + (":" if uns else ""))
    print("      i    j    l        kx        kz       ky0        growth     frequency   M")
    for m in uns[:20]:
        print(f"  {m.i:5d}{m.j:5d}{m.l:5d}{m.kx:10.5g}{m.kz:10.5g}{m.ky0:10.5g}"
              f"{m.growth:14.6g}{m.frequency:14.6g}{m.M:4d}")
    if len(uns) > 20:
        print(f"  ... {len(uns) - 20} more (see --csv)")
    if rep.fastest_free is not None:
        o = rep.fastest_free
        print(f"fastest mode of the unbounded flow: kx={o.kx:.6g} kz={o.kz:.6g} ky0={o.ky0:.6g} "
              f"{_cplx(o.sigma)}")
    else:
        print("the unbounded flow has no unstable mode in the scanned range")
    if rep.hint:
        h = rep.hint
        print(f"resolution hint (linear phase of the fastest box mode): Nx >= {h['Nx']}, "
              f"Ny >= {h['Ny']}, Nz >= {h['Nz']} (y-harmonics up to index {h['ny_max']} "
              f"carry all but {h['tail']:.0e} of its energy; 2/3 dealiasing)")
    for w in rep.warnings:
        print(f"warning: {w}")
    if args.csv:
        from .tables import write_csv
        rows = [[m.i, m.j, m.l, m.kx, m.kz, m.ky0, m.growth, m.frequency, m.M,
                 int(m.converged), m.change] for m in sorted(rep.modes, key=lambda m: -m.growth)]
        extra = {f"warning{k}": w for k, w in enumerate(rep.warnings)}
        if rep.hint:
            extra["resolution_hint"] = f"Nx>={rep.hint['Nx']} Ny>={rep.hint['Ny']} Nz>={rep.hint['Nz']}"
        write_csv(args.csv, ["i", "j", "l", "kx", "kz", "ky0", "growth", "frequency", "M",
                             "converged", "truncation_change"], rows, "box", params, cy,
                  extra=extra, force=args.force)
        print(f"wrote {args.csv}")
    if args.png:
        from .plots import growth_map_figure
        kx_hi = max([1.2 * params.kf] + [1.2 * m.kx for m in uns])
        kz_hi = max([2.0 * params.kf] + [1.2 * m.kz for m in uns])
        gm = maps.growth_map(params, np.linspace(kx_hi / 30, kx_hi, 30), np.linspace(0, kz_hi, 30))
        growth_map_figure(gm, args.png, "\n".join(_provenance("box", params, cy)), box=box,
                          optimum=rep.fastest_free)
        print(f"wrote {args.png}")
    return 0


@_guard
def run_mode(args):
    """Eigenmode -> perturbation file."""
    from . import boxfit, modefile
    params, case, cy = _setup(args)
    if args.force is False:
        import os
        if os.path.exists(args.output):
            raise BadInput(f"--output: {args.output} exists; pass --force to replace it")
    box = _box(case)
    if args.index is not None:
        if len(args.index) not in (2, 3) or any(v < 0 for v in args.index):
            raise BadInput("--index: expected I J [L], whole numbers >= 0")
        if args.index[0] == 0 and args.index[1] == 0:
            raise BadInput("--index: I = J = 0 has no x or z dependence; choose I >= 1 or J >= 1")
        i, j = args.index[:2]
        l = args.index[2] if len(args.index) == 3 else 0
        kx, kz, ky0 = (2 * math.pi * i / box.Lx, 2 * math.pi * j / box.Lz,
                       2 * math.pi * l / box.Ly)
    else:
        rep = boxfit.scan(params, box, free=False)
        if rep.fastest_box is None:
            raise BadInput(f"--index: no unstable mode fits the box of {args.case}; "
                           "choose one with --index I J [L]")
        m = rep.fastest_box
        kx, kz, ky0 = m.kx, m.kz, m.ky0
    try:
        fields, meta = modefile.mode_fields(params, box, kx, kz, ky0)
    except ValueError as exc:
        raise BadInput(str(exc)) from None
    modefile.write_mode_file(args.output, fields, meta, cy, force=args.force)
    _print_header(params, case)
    print(f"mode i={meta['index_x']} j={meta['index_z']} l={meta['index_y0']} "
          f"(kx={kx:.6g}, kz={kz:.6g}, ky0={ky0:.6g}): {_cplx(complex(meta['sigma_real'], meta['sigma_imag']))}")
    print(f"energy share left out by the grid: {meta['dropped_energy']:.2e}")
    print(f"wrote {args.output}; start a run from it with\n"
          f"  initial: {{kind: eigenmode, path: {args.output}, amplitude: 1.0e-4}}")
    return 0


def main(argv=None) -> int:
    """Stand-alone entry (``python -m shearmix.tools.stability.cli ...``), same as ``shearmix stability``."""
    parser = argparse.ArgumentParser(prog="shearmix")
    sub = parser.add_subparsers(dest="command")
    add_arguments(sub)
    args = parser.parse_args(["stability"] + list(sys.argv[1:] if argv is None else argv))
    return int(args.func(args) or 0)


if __name__ == "__main__":
    sys.exit(main())
