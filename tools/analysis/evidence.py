"""Where each regime threshold falls among the members of a summary table.

``shearmix regimes evidence SUMMARY.csv`` (the ``summary.csv`` of
``shearmix sweep summarize``, or the ``--csv`` of ``shearmix summary``): for
every field of :class:`~shearmix.tools.analysis.regimes.RegimeThresholds`,
the members' values of the number it is compared with, in increasing order,
each with the member's label, a line where the threshold lies, and the
interval of threshold values that would split the members the same way.
This is the evidence a campaign gives for placing a threshold
(docs/analysis.md#regimes).

A rule alone decides the split shown; the label beside each value is the one
in the table, which also depends on the rules before it (a run with
``viscous_ratio`` below its threshold is ``viscous_layers`` whatever its
``eta``).
"""
from __future__ import annotations

import csv
import math

from shearmix.tools.analysis.regimes import RegimeThresholds

__all__ = ["read_table", "threshold_evidence", "format_evidence"]


def _float(text):
    try:
        v = float(text)
    except (TypeError, ValueError):
        return float("nan")
    return v


def read_table(path):
    """Rows of a summary CSV as dicts of strings; ValueError (one line) for a bad file."""
    try:
        with open(path, newline="") as fh:
            rows = list(csv.DictReader(fh))
    except UnicodeDecodeError:
        raise ValueError(f"{path}: not a text CSV table") from None
    if not rows:
        raise ValueError(f"{path}: no rows (expected a summary table from 'shearmix sweep summarize')")
    if "regime" not in rows[0]:
        raise ValueError(f"{path}: no 'regime' column; not a summary table")
    return rows


def _fires(x, op, th):
    return {"<": x < th, "<=": x <= th, ">": x > th, ">=": x >= th}[op]


def threshold_evidence(rows, thresholds=None):
    """One entry per threshold: its value, rule, the members' values and the split.

    Parameters
    ----------
    rows : list of mapping
        Summary rows (strings or numbers); the member is named by ``member``
        (sweep tables) or ``run``.
    thresholds : RegimeThresholds, optional

    Returns
    -------
    list of dict
        ``name``, ``value``, ``number``, ``op``, ``label``, ``doc``,
        ``points`` (list of ``(member, BPe, x, regime, fires)`` sorted by
        ``x``), ``missing`` (members without a finite ``x``), ``interval``
        (``(lo, hi, lo_closed, hi_closed)`` of threshold values giving the same
        split, ``None`` without points), ``present`` (the column exists).
    """
    th = thresholds or RegimeThresholds()
    out = []
    for name, number, op, label, doc in th.rules():
        value = getattr(th, name)
        present = any(number in r for r in rows)
        pts, missing = [], []
        for r in rows:
            who = r.get("member") or r.get("run") or "?"
            x = _float(r.get(number))
            if math.isfinite(x):
                pts.append((who, _float(r.get("BPe")), x, r.get("regime", ""), _fires(x, op, value)))
            else:
                missing.append(who)
        pts.sort(key=lambda p: p[2])
        interval = None
        if pts:
            low_side = [p[2] for p in pts if _fires(p[2], op, value) == (op in ("<", "<="))]
            high_side = [p[2] for p in pts if _fires(p[2], op, value) != (op in ("<", "<="))]
            # thresholds are >= 0, so with no member below the interval starts at 0
            lo = max(low_side) if low_side else 0.0
            hi = min(high_side) if high_side else math.inf
            # "<" and ">=" put a tie above the threshold; ">" and "<=" below it
            above_ties = op in ("<", ">=")
            interval = (lo, hi, not above_ties or not low_side, above_ties and bool(high_side))
        out.append({"name": name, "value": value, "number": number, "op": op, "label": label,
                    "doc": doc, "points": pts, "missing": missing, "interval": interval,
                    "present": present})
    return out


def _g(x):
    return f"{x:.4g}" if math.isfinite(x) else ("-inf" if x < 0 else "inf") if x == x else "-"


def _interval_text(e):
    lo, hi, lo_closed, hi_closed = e["interval"]
    return (f"{'[' if lo_closed else '('}{_g(lo)}, {_g(hi)}{']' if hi_closed else ')'}")


def format_evidence(entries, markdown=False):
    """Text (or Markdown) of :func:`threshold_evidence` entries."""
    lines = []
    for e in entries:
        head = f"{e['name']} = {e['value']:g}: {e['label']} when {e['number']} {e['op']} {e['value']:g}"
        lines.append(f"### {head}" if markdown else head)
        lines.append(("" if markdown else "  ") + e["doc"])
        if markdown:
            lines.append("")
        if not e["present"]:
            lines.append(("" if markdown else "  ")
                         + f"column '{e['number']}' not in the table (written before it existed)")
            lines.append("")
            continue
        if markdown:
            lines += [f"| member | BPe | {e['number']} | regime |", "|---|---|---|---|"]
        else:
            lines.append(f"  {'member':16s} {'BPe':>8s} {e['number']:>15s}  regime")
        marked = False
        low_first = e["op"] in ("<", "<=")
        for who, bpe, x, regime, fires in e["points"]:
            on_high_side = fires != low_first
            if on_high_side and not marked:
                lines.append(_marker(e, markdown))
                marked = True
            lines.append(f"| {who} | {_g(bpe)} | {_g(x)} | {regime} |" if markdown else
                         f"  {who:16s} {_g(bpe):>8s} {_g(x):>15s}  {regime}")
        if not marked:
            lines.append(_marker(e, markdown))
        if markdown:
            lines.append("")
        pre = "" if markdown else "  "
        if e["interval"] is not None:
            fired = sum(p[4] for p in e["points"])
            lines.append(f"{pre}{fired} of {len(e['points'])} members satisfy {e['number']} {e['op']} "
                         f"{e['value']:g}; any {e['name']} in {_interval_text(e)} splits them the same way")
        else:
            lines.append(f"{pre}no member has a finite {e['number']}")
        if e["missing"]:
            lines.append(f"{pre}without a finite {e['number']}: {', '.join(e['missing'])}")
        lines.append("")
    return "\n".join(lines).rstrip() + "\n"


def _marker(e, markdown):
    text = f"{e['name']} = {e['value']:g}"
    return f"| **{text}** | | | |" if markdown else f"  {('-- ' + text + ' '):-<48s}"
