"""Markdown tables of docs/campaign.md from the committed CSV files of docs/campaign/.

    python scripts/campaign/tables.py [DIR] [--fill PAGE]   (default DIR: docs/campaign)

Prints the tables, or with ``--fill`` writes each between the page's markers
``<!-- tables:TITLE -->`` and ``<!-- end -->`` (docs/campaign.md), so the page
and the CSV files cannot drift apart. Columns a table lacks print as '-'.
"""
from __future__ import annotations

import csv
import math
import os
import sys


def _num(row, key):
    try:
        v = float(row.get(key, ""))
    except ValueError:
        return math.nan
    return v


def _fmt(v, digits=3):
    if not math.isfinite(v):
        return "-"
    return f"{v:.{digits}g}"


def _pm(row, key):
    """``value ± error`` with the error to two significant digits, the value to match."""
    v, e = _num(row, key), _num(row, key + "_err")
    if not math.isfinite(v):
        return "-"
    if not math.isfinite(e) or e <= 0:
        return _fmt(v)
    place = -int(math.floor(math.log10(e))) + 1
    place = max(place, 0)
    return f"{v:.{place}f} ± {e:.{place}f}"


def _table(head, rows):
    out = ["| " + " | ".join(head) + " |", "|" + "---|" * len(head)]
    out += ["| " + " | ".join(r) + " |" for r in rows]
    return "\n".join(out)


def _bpe(row):
    return _fmt(_num(row, "BPe"), 4)


def averages(rows):
    head = ["BPe", "window", "tau's", "eta", "w_rms", "Lz_turb", "Lz_jets", "D_estimate",
            "D_flux", "kmax eta_K", "regime"]
    body = [[_bpe(r), f"{_fmt(_num(r, 't_start'), 4)}-{_fmt(_num(r, 't_end'), 4)}",
             _fmt(_num(r, "correlation_times"), 2), _pm(r, "eta"), _pm(r, "w_rms"),
             _pm(r, "Lz_turb"), _pm(r, "Lz_jets"), _pm(r, "D_estimate"), _pm(r, "D_flux"),
             _pm(r, "kmax_etaK"), r.get("regime", "-") or "-"] for r in rows]
    return _table(head, body)


def numbers(rows):
    head = ["BPe", "isotropy", "viscous_ratio", "quiet_fraction", "eta", "Ri_jets",
            "Kmean", "Kfluct", "growth", "regime"]
    body = [[_bpe(r), _fmt(_num(r, "isotropy")), _fmt(_num(r, "viscous_ratio")),
             _fmt(_num(r, "quiet_fraction")), _fmt(_num(r, "eta")), _pm(r, "Ri_jets"),
             _pm(r, "Kmean"), _pm(r, "Kfluct"), _fmt(_num(r, "growth")),
             r.get("regime", "-") or "-"] for r in rows]
    return _table(head, body)


def tracers(rows, names=("sc1", "sc10")):
    head = ["BPe", "D_estimate"]
    for n in names:
        head += [f"D_c.{n}", f"D_chi.{n}", f"kmax eta_B.{n}"]
    body = []
    for r in rows:
        line = [_bpe(r), _pm(r, "D_estimate")]
        for n in names:
            line += [_pm(r, f"D_c.{n}"), _pm(r, f"D_chi.{n}"), _fmt(_num(r, f"kmax_etaB.{n}"))]
        body.append(line)
    return _table(head, body)


def _short(w):
    """A warning in a table cell: the segment notice shortened to its start time."""
    if w.startswith("segment ") and "(from t = " in w:
        return "window segment from t = " + w.split("(from t = ", 1)[1].split(",", 1)[0]
    return w.replace("|", "/")


def warnings(rows):
    body = []
    for r in rows:
        ws = [_short(w.strip()) for w in (r.get("warnings") or "").split(";") if w.strip()]
        body.append([_bpe(r) if "BPe" in r else r.get("run", "-"), "; ".join(ws) or "-"])
    return _table(["BPe / run", "warnings"], body)


def fits(rows):
    head = ["y", "exponent p", "95% interval", "points", "BPe range", "expected", "consistent"]
    body = []
    for r in rows:
        p, e, lo, hi, n = (_num(r, k) for k in ("p", "p_err", "p_lo", "p_hi", "n"))
        body.append([r.get("y", "-"), f"{_fmt(p)} ± {_fmt(e, 2)}", f"[{_fmt(lo)}, {_fmt(hi)}]",
                     _fmt(n), f"{_fmt(_num(r, 'x_lo'))}-{_fmt(_num(r, 'x_hi'))}",
                     r.get("expected", "") or "-", r.get("consistent", "") or "-"])
    return _table(head, body)


def extras(rows):
    head = ["run", "model", "window", "eta", "w_rms", "Lz_turb", "Lz_jets",
            "isotropy", "D_estimate", "D_c.sc1", "D_c.sc10", "kmax eta_K", "regime"]
    body = [[r.get("run", "-"), r.get("model", "-"),
             f"{_fmt(_num(r, 't_start'), 4)}-{_fmt(_num(r, 't_end'), 4)}", _pm(r, "eta"),
             _pm(r, "w_rms"), _pm(r, "Lz_turb"), _pm(r, "Lz_jets"), _fmt(_num(r, "isotropy")),
             _pm(r, "D_estimate"), _pm(r, "D_c.sc1"), _pm(r, "D_c.sc10"), _pm(r, "kmax_etaK"),
             r.get("regime", "-") or "-"] for r in rows]
    return _table(head, body)


def _read(path):
    if not os.path.exists(path):
        return []
    with open(path, newline="") as fh:
        return list(csv.DictReader(fh))


def tables(d):
    """``{title: markdown}`` of every table from the CSV files in ``d``."""
    summary = sorted(_read(os.path.join(d, "summary.csv")), key=lambda r: _num(r, "BPe"))
    return {"Averages": averages(summary), "Numbers behind the labels": numbers(summary),
            "Tracers": tracers(summary), "Warnings": warnings(summary),
            "Fits, all members": fits(_read(os.path.join(d, "fits.csv"))),
            "Fits, stratified range": fits(_read(os.path.join(d, "fits-stratified.csv"))),
            "Extras": extras(_read(os.path.join(d, "extras.csv")))}


def fill(page, found):
    """Replace the text between each ``<!-- tables:TITLE -->`` and the next
    ``<!-- end -->`` of ``page`` by that table."""
    text = open(page, encoding="utf-8").read()
    for title, table in found.items():
        start = f"<!-- tables:{title} -->"
        if start not in text:
            continue
        i = text.index(start) + len(start)
        j = text.index("<!-- end -->", i)
        text = text[:i] + "\n" + table + "\n" + text[j:]
    open(page, "w", encoding="utf-8").write(text)


def main(argv):
    args = argv[1:]
    page = None
    if "--fill" in args:
        k = args.index("--fill")
        page = args[k + 1]
        del args[k:k + 2]
    d = args[0] if args else os.path.join(os.path.dirname(__file__), "..", "..", "docs", "campaign")
    found = tables(d)
    if page:
        fill(page, found)
        return 0
    for title, text in found.items():
        print(f"### {title}\n\n{text}\n")
    return 0


if __name__ == "__main__":
    sys.exit(main(sys.argv))
