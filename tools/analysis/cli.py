"""Command-line subcommands of the analysis tools: ``summary`` and ``fit``.

    shearmix summary RUN_DIR... [--start T] [--csv FILE] [--json FILE]
                     [--thresholds FILE.yaml] [--kmax-etak-min X]
                     [--min-correlation-times N] [--pe-turb-max X] [--segment N|all]
                     [--tracer-sigmas X] [--tracer-drift-max F]
    shearmix fit TABLE.csv --x BPe --y Lz_turb [--range LO HI]
                 [--confidence C] [--no-errors]
    shearmix regimes evidence SUMMARY.csv [--thresholds FILE] [--markdown]
    shearmix regimes thresholds [--thresholds FILE] [--yaml | --markdown]
    shearmix growth RUN_DIR [--segment N] [--json FILE [--force]] [--tolerance X]
                    [--confidence C] [--min-records N] [--min-efolds X] [--end-trim F]
                    [--no-theory]

Registered by :func:`add_arguments` on the program's subparsers; each
subcommand's handler is stored as ``func`` and returns an exit code
(0 done, 2 bad input). :func:`dispatch` runs the handler of parsed arguments.
"""
from __future__ import annotations

import argparse
import math
import sys

EXIT_BAD_INPUT = 2

__all__ = ["add_arguments", "dispatch", "main", "cmd_summary", "cmd_fit", "cmd_evidence",
           "cmd_thresholds", "cmd_growth"]

_SHOWN = ("eta", "I", "eps", "J", "u_rms", "v_rms", "w_rms", "Lz_turb", "D_flux", "D_estimate",
          "kmax_etaK", "Pe_turb", "Kmean", "Kfluct", "u_fluct_rms", "v_fluct_rms", "w_fluct_rms",
          "isotropy_fluct", "K2d_laminar", "K2d_pert", "K3d", "Lz_jets", "Ri_jets")
#: per tracer, under its name (shearmix.tools.analysis.summary.TRACER_AVERAGED)
TRACER_SHOWN = ("D_c", "D_chi", "c_rms", "kmax_etaB")


def _fail(message):
    print(f"shearmix: error: {message}", file=sys.stderr)
    return EXIT_BAD_INPUT


def _segment(text):
    if text == "all":
        return "all"
    try:
        return int(text)
    except ValueError:
        raise argparse.ArgumentTypeError(f"--segment: expected a whole number or 'all', got {text!r}") from None


def _fmt(mean, err):
    if not math.isfinite(mean):
        return "-"
    return f"{mean:.5g} +- {err:.2g}"


def regime_numbers_text(row):
    """The numbers behind a row's regime label, in one line (what the rules compared)."""
    lz = "Lz_jets" if row.get("regime_basis") == "fluctuations" else "Lz_turb"
    return (f"isotropy {row['isotropy']:.3g}, viscous_ratio {row['viscous_ratio']:.3g} "
            f"({lz} / l_nu, l_nu = {row['l_nu']:.3g}), eta {row['eta']:.3g}, "
            f"quiet_fraction {row['quiet_fraction']:.3g}; basis: {row.get('regime_basis', '')}")


def _print_row(row, out):
    print(f"run {row['run']}  ({row['model']}, Re={row['Re']:g}, BPe={row['BPe']:g})", file=out)
    if row["segments"] > 1:
        where = "all segments" if row["segment"] == "all" else \
            f"segment {row['segment']} of {row['segments']} (from t = {row['segment_t']:.6g})"
        print(f"  averaged    {where}", file=out)
    print(f"  window [{row['t_start']:.6g}, {row['t_end']:.6g}] ({row['steady_method']}), "
          f"{row['correlation_times']:.3g} autocorrelation times", file=out)
    for q in _SHOWN:
        if math.isfinite(row.get(q, float("nan"))):
            print(f"  {q:<11s} {_fmt(row[q], row[q + '_err'])}", file=out)
    for n in [k.split(".", 1)[1] for k in row if k.startswith("Sc.")]:
        print(f"  tracer {n}  (Sc {row[f'Sc.{n}']:.4g}, Pe_c {row[f'Pe_c.{n}']:.4g}, "
              f"G {row[f'G.{n}']:.4g})", file=out)
        for q in TRACER_SHOWN:
            key = f"{q}.{n}"
            if math.isfinite(row.get(key, float("nan"))):
                print(f"    {q:<9s} {_fmt(row[key], row[key + '_err'])}", file=out)
    print(f"  eps_cv      {row['eps_cv']:.3g}   (flatness {row['eps_flatness']:.3g})", file=out)
    print(f"  flux        quiet_fraction {row['quiet_fraction']:.3g}   (flux_cv {row['flux_cv']:.3g})",
          file=out)
    print(f"  regime      {row['regime']}: {row['regime_reason']}", file=out)
    print(f"    from      {regime_numbers_text(row)}", file=out)
    for w in row["warnings"]:
        print(f"  warning: {w}", file=out)


def cmd_summary(args):
    """Handler of ``summary``: print, and optionally write CSV/JSON."""
    from shearmix.tools.analysis.regimes import RegimeThresholds
    from shearmix.tools.analysis.summary import SummaryOptions, summarize_run, write_csv, write_json

    try:
        th = RegimeThresholds.from_yaml(args.thresholds) if args.thresholds else RegimeThresholds()
        opts = SummaryOptions(start=args.start, kmax_etaK_min=args.kmax_etak_min,
                              min_correlation_times=args.min_correlation_times,
                              pe_turb_max=args.pe_turb_max, thresholds=th,
                              segment=args.segment, tracer_sigmas=args.tracer_sigmas,
                              tracer_drift_max=args.tracer_drift_max)
        rows = [summarize_run(d, opts) for d in args.run_dirs]
    except (ValueError, OSError) as exc:
        return _fail(str(exc))
    for row in rows:
        _print_row(row, sys.stdout)
    try:
        if args.csv:
            write_csv(rows, args.csv)
        if args.json:
            write_json(rows[0] if len(rows) == 1 else rows, args.json)
    except OSError as exc:
        return _fail(f"cannot write output: {exc}")
    return 0


def cmd_fit(args):
    """Handler of ``fit``: power law of two table columns with its interval."""
    from shearmix.tools.analysis.fits import fit_table, segment_notes

    try:
        fit, comp = fit_table(args.table, args.x, args.y, x_range=args.range,
                              confidence=args.confidence, use_errors=not args.no_errors)
        notes = segment_notes(args.table)
    except (ValueError, OSError) as exc:
        return _fail(str(exc))
    for note in notes:
        print(f"  {note}")
    pct = 100 * fit.confidence
    print(f"{args.y} = A * {args.x}^p over {args.x} in [{fit.x_range[0]:g}, {fit.x_range[1]:g}] "
          f"({fit.n} runs)")
    print(f"  p = {fit.p:.4g} +- {fit.p_stderr:.2g}   {pct:g}% interval [{fit.p_ci[0]:.4g}, {fit.p_ci[1]:.4g}]")
    print(f"  A = {fit.A:.4g}   {pct:g}% interval [{fit.A_ci[0]:.4g}, {fit.A_ci[1]:.4g}]")
    print(f"  reduced chi-square {fit.chi2_red:.3g} ({fit.dof} degrees of freedom)")
    if comp is not None:
        verdict = "consistent" if comp["consistent"] else "not consistent"
        print(f"  expected p = {comp['expected']:.4g} (docs/equations.md#regimes, fact of the trade): {verdict} "
              f"at {pct:g}% (difference {comp['difference']:+.3g}, {comp['z']:+.2f} standard errors)")
    return 0


def _thresholds(args):
    from shearmix.tools.analysis.regimes import RegimeThresholds
    return RegimeThresholds.from_yaml(args.thresholds) if args.thresholds else RegimeThresholds()


def cmd_evidence(args):
    """Handler of ``regimes evidence``: where each threshold falls among a table's members."""
    from shearmix.tools.analysis.evidence import format_evidence, read_table, threshold_evidence
    try:
        th = _thresholds(args)
        rows = read_table(args.table)
    except (ValueError, OSError) as exc:
        return _fail(str(exc))
    sys.stdout.write(format_evidence(threshold_evidence(rows, th), markdown=args.markdown))
    return 0


def cmd_thresholds(args):
    """Handler of ``regimes thresholds``: the thresholds in use, as text, YAML or Markdown."""
    from shearmix.tools.analysis.regimes import thresholds_markdown, thresholds_yaml
    try:
        th = _thresholds(args)
    except (ValueError, OSError) as exc:
        return _fail(str(exc))
    if args.yaml:
        sys.stdout.write(thresholds_yaml(th))
    elif args.markdown:
        print(thresholds_markdown(th))
    else:
        for name, number, op, label, doc in th.rules():
            print(f"{name:20s} {getattr(th, name):<8g} {label} when {number} {op} {name}")
    return 0


def _phase_lines(p, linear, out):
    pct = f"{100 * p.confidence:g}%"
    print(f"  phase       t = {p.t_start:.6g} .. {p.t_end:.6g} ({p.records} records, "
          f"{p.efolds:.3g} e-folds; largest distance from the fit {p.deviation:.2g}, "
          f"residual lag-1 correlation {p.lag1:.2f})", file=out)
    print(f"  rate        {p.rate:.6g} +- {p.stderr:.2g} (scatter) +- {p.ends:.2g} (ends); "
          f"{pct} interval [{p.interval[0]:.6g}, {p.interval[1]:.6g}]", file=out)
    if linear is not None and linear.growth > 0:
        lo, hi = (x / linear.growth for x in p.interval)
        print(f"  ratio       {p.rate / linear.growth:.5f} of the linear rate "
              f"({pct} interval [{lo:.5f}, {hi:.5f}])", file=out)


def _linear_line(mode, fam):
    if mode is None:
        return (f"  linear      no {fam.upper()} box mode below the energy bound and inside the "
                "grid's band (every one decays)")
    state = "" if mode.growth > 0 else " (stable: no such box mode grows)"
    return (f"  linear      {mode.growth:.6g}{state}, fastest {fam.upper()} box mode i={mode.i} "
            f"j={mode.j} l={mode.l} (kx={mode.kx:.4g}, kz={mode.kz:.4g}, ky0={mode.ky0:.4g}), "
            f"frequency {mode.frequency:.4g}, |n| <= {mode.M}")


def cmd_growth(args):
    """Handler of ``growth``: the exponential phases of a run against linear theory."""
    from shearmix.tools.analysis.growth import FAMILIES, GrowthError, GrowthOptions, analyse_run, write_json

    try:
        opts = GrowthOptions(tolerance=args.tolerance, confidence=args.confidence,
                             min_records=args.min_records, min_efolds=args.min_efolds,
                             end_trim=args.end_trim, segment=args.segment)
        if args.json:
            from shearmix.tools.stability.tables import check_writable
            check_writable(args.json, args.force, "--json")
        res = analyse_run(args.run_dir, opts, theory=not args.no_theory,
                          progress=lambda m: print(f"shearmix: {m}", file=sys.stderr, flush=True))
    except (GrowthError, ValueError, OSError) as exc:
        return _fail(str(exc))
    out = sys.stdout
    where = f", segment {res['segment']} of {res['segments']}" if res["segments"] > 1 else ""
    print(f"run {res['run']}{where}: {res['records']} records, t = {res['t_first']:.6g} .. "
          f"{res['t_last']:.6g}", file=out)
    print(f"  phases straight within {opts.tolerance:g} in ln(amplitude), at least "
          f"{opts.min_records} records and {opts.min_efolds:g} e-folds; amplitude rates "
          f"(energy grows at twice them)", file=out)
    for fam, (key, what) in FAMILIES.items():
        phases = res["phases"][fam]
        print(f"{fam.upper()} family: sqrt({key}), {what}", file=out)
        linear = res["linear"][fam]
        if not args.no_theory:
            print(_linear_line(linear, fam), file=out)
        if not phases:
            print("  phase       none found", file=out)
            continue
        _phase_lines(phases[0], linear, out)
        for p in phases[1:]:
            print(f"  also        t = {p.t_start:.6g} .. {p.t_end:.6g} ({p.records} records): rate "
                  f"{p.rate:.6g}, {100 * p.confidence:g}% interval [{p.interval[0]:.6g}, "
                  f"{p.interval[1]:.6g}]", file=out)
    print(f"onset: {res['onset']}", file=out)
    if res["verdict_3d"] is not None:
        print(f"3D growth: {res['verdict_3d'][1]}", file=out)
    for w in res["warnings"]:
        print(f"  warning: {w}", file=out)
    if args.json:
        try:
            write_json(res, args.json)
        except OSError as exc:
            return _fail(f"--json: cannot write {args.json}: {exc}")
        print(f"wrote {args.json}", file=out)
    return 0


def add_arguments(subparsers):
    """Register ``summary``, ``fit``, ``regimes`` and ``growth`` on an argparse subparsers object."""
    p = subparsers.add_parser("summary", help="time averages, errors, regime and warnings of runs")
    p.add_argument("run_dirs", nargs="+", metavar="RUN_DIR", help="run folder (or its timeseries.h5)")
    p.add_argument("--start", type=float, metavar="T", help="steady-state start time (skips detection)")
    p.add_argument("--csv", metavar="FILE", help="write all rows to one CSV table")
    p.add_argument("--json", metavar="FILE", help="write the row(s) as JSON")
    p.add_argument("--thresholds", metavar="FILE", help="regime thresholds (YAML mapping)")
    p.add_argument("--kmax-etak-min", type=float, default=1.0, metavar="X",
                   help="under-resolution warning below this kmax*eta_K (default 1.0)")
    p.add_argument("--min-correlation-times", type=float, default=50.0, metavar="N",
                   help="too-short warning below this many autocorrelation times (default 50)")
    p.add_argument("--pe-turb-max", type=float, default=1.0, metavar="X",
                   help="low-Peclet validity warning above this Pe_turb (default 1)")
    p.add_argument("--tracer-sigmas", type=float, default=2.0, metavar="X",
                   help="tracer not-at-equilibrium warning when D_c and D_chi differ by more "
                        "than X combined standard errors (default 2)")
    p.add_argument("--tracer-drift-max", type=float, default=0.1, metavar="F",
                   help="... or when the c_rms means of the window's halves differ by more "
                        "than this fraction (default 0.1)")
    p.add_argument("--segment", type=_segment, default=None, metavar="N|all",
                   help="segment of the series to average: a number (0 the first, -1 the last, "
                        "the default) or 'all' to cross the changes (with a warning)")
    p.set_defaults(func=cmd_summary)

    p = subparsers.add_parser("fit", help="power-law fit of two columns of a summary table")
    p.add_argument("table", metavar="TABLE.csv")
    p.add_argument("--x", required=True, help="column of the abscissa, e.g. BPe")
    p.add_argument("--y", required=True, help="column of the ordinate, e.g. Lz_turb")
    p.add_argument("--range", nargs=2, type=float, metavar=("LO", "HI"), help="fit only LO <= x <= HI")
    p.add_argument("--confidence", type=float, default=0.95, help="interval level (default 0.95)")
    p.add_argument("--no-errors", action="store_true", help="ignore the <y>_err column (unweighted fit)")
    p.set_defaults(func=cmd_fit)

    p = subparsers.add_parser("regimes", help="regime thresholds and the evidence that places them")
    acts = p.add_subparsers(dest="action", metavar="ACTION")
    acts.required = True
    a = acts.add_parser("evidence", help="each threshold among the ordered values of a summary table")
    a.add_argument("table", metavar="SUMMARY.csv", help="summary.csv of 'sweep summarize' (or --csv of 'summary')")
    a.add_argument("--thresholds", metavar="FILE", help="regime thresholds (YAML mapping)")
    a.add_argument("--markdown", action="store_true", help="Markdown tables (for docs/campaign.md)")
    a.set_defaults(func=cmd_evidence)
    a = acts.add_parser("thresholds", help="the thresholds in use (defaults, or --thresholds FILE)")
    a.add_argument("--thresholds", metavar="FILE", help="regime thresholds (YAML mapping)")
    fmt = a.add_mutually_exclusive_group()
    fmt.add_argument("--yaml", action="store_true", help="as the file --thresholds reads")
    fmt.add_argument("--markdown", action="store_true", help="as the table of docs/equations.md#regimes")
    a.set_defaults(func=cmd_thresholds)

    p = subparsers.add_parser("growth", help="exponential growth phases of a run against linear theory")
    p.add_argument("run_dir", metavar="RUN_DIR", help="run folder (or its timeseries.h5)")
    p.add_argument("--segment", type=int, default=None, metavar="N",
                   help="segment of the series (0 the first, -1 the last, the default)")
    p.add_argument("--json", metavar="FILE", help="write the phases, rates and linear theory as JSON")
    p.add_argument("--force", action="store_true", help="replace an existing --json file")
    p.add_argument("--tolerance", type=float, default=0.02, metavar="X",
                   help="largest distance of ln(amplitude) from a line within a phase (default 0.02)")
    p.add_argument("--confidence", type=float, default=0.95, metavar="C",
                   help="level of the intervals (default 0.95)")
    p.add_argument("--min-records", type=int, default=8, metavar="N",
                   help="fewest records in a phase (default 8)")
    p.add_argument("--min-efolds", type=float, default=1.0, metavar="X",
                   help="least growth of ln(amplitude) over a phase (default 1)")
    p.add_argument("--end-trim", type=float, default=0.25, metavar="F",
                   help="share of a phase dropped at its ends for the ends uncertainty (default 0.25)")
    p.add_argument("--no-theory", action="store_true",
                   help="skip the eigenproblem (no linear rates, ratios or 3D verdict)")
    p.set_defaults(func=cmd_growth)


def dispatch(args):
    """Run the handler chosen by the parsed arguments; return its exit code."""
    return int(args.func(args) or 0)


def main(argv=None):
    """Stand-alone entry (the program's own dispatcher normally does this)."""
    parser = argparse.ArgumentParser(prog="shearmix-analysis")
    sub = parser.add_subparsers(dest="command", metavar="COMMAND")
    sub.required = True
    add_arguments(sub)
    return dispatch(parser.parse_args(argv))


if __name__ == "__main__":
    sys.exit(main())
