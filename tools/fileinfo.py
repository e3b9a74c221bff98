"""``shearmix info FILE``: what a checkpoint or snapshot holds, from its header alone.

Prints kind, program version, time, step, model, parameters, forcing, grid,
box, datasets and the run's history (start, restarts, parameter changes).
Only attributes and dataset shapes are read, so it is instant on any file
size; ``--verify`` additionally checks every checksum of a checkpoint.
"""
from __future__ import annotations

import yaml

from shearmix.solver.files.checkpoint import verify as verify_checkpoint
from shearmix.solver.files.fileheader import read_header


def _case(text: str) -> dict:
    try:
        data = yaml.safe_load(text)
    except yaml.YAMLError:
        return {}
    return data if isinstance(data, dict) else {}


def _mapping(d: dict) -> str:
    return ", ".join(f"{k} = {v}" for k, v in d.items() if v is not None) or "-"


def _event(e: dict) -> str:
    where = f"t = {e.get('t', 0):.10g}, step {e.get('step', 0)}"
    if e.get("event") == "start":
        return (f"start at {where} on {e.get('ranks')} rank(s), shearmix {e.get('version')}, "
                f"{e.get('date', '')}, initial state {e.get('initial')}")
    text = (f"restart at {where} from {e.get('from')}, ranks {e.get('ranks_before')} -> "
            f"{e.get('ranks')}, shearmix {e.get('version_before')} -> {e.get('version')}, "
            f"{e.get('date', '')}")
    changes = e.get("changes") or {}
    if changes:
        # a key set on one side only is "unset" on the other (never Python's None)
        from shearmix.tools.cli import _shown
        text += "; changed " + ", ".join(f"{k}: {_shown(a)} -> {_shown(b)}" for k, (a, b) in changes.items())
    return text


def describe(path: str, verify: bool = False) -> str:
    """The report ``shearmix info`` prints; ``ValueError`` (one line) for a bad file."""
    h = read_header(path)
    if verify and h["kind"] == "checkpoint":
        verify_checkpoint(path)
    case = _case(h["case"])
    nx, ny, nz = h["grid"]
    lx, ly, lz = h["lengths"]
    lines = [
        ("file", path),
        ("kind", f"{h['kind']}, format {h.get('format_version')}, written by shearmix "
                 f"{h.get('version')} on {h.get('ranks')} rank(s), {h.get('written', '')}"),
        ("time", f"t = {h['t']:.10g}, step {h['step']}, dt = {h.get('dt', float('nan')):.6g}"),
        ("model", f"{h['model']} (fields {', '.join(h['fields'])})"),
        ("parameters", _mapping(case.get("parameters", {}))),
        ("forcing", _mapping(case.get("forcing", {}))),
        ("grid", f"{nx} x {ny} x {nz}, box {lx:.6g} x {ly:.6g} x {lz:.6g}"),
    ]
    if h["kind"] == "snapshot":
        lines.append(("snapshot", f"stride {h.get('stride')}, {h.get('precision')} precision, "
                                  f"axes {h.get('axes')}"))
    shapes = ", ".join(f"{k} {v}" for k, v in sorted(h["datasets"].items()))
    lines.append(("datasets", shapes))
    if verify and h["kind"] == "checkpoint":
        lines.append(("checksums", "all columns verified"))
    out = [f"{k:11s} {v}" for k, v in lines]
    out.append("history")
    out += [f"  {i + 1}. {_event(e)}" for i, e in enumerate(h["history"])]
    return "\n".join(out)
