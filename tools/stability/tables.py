"""CSV tables written by the stability tool.

Every file starts with ``#`` comment lines recording the program, its
version, the physical convention, the parameters and the full case (YAML);
then one header row and the data rows (plain ``csv`` module, ``,``
separated, complex numbers split into growth rate and frequency).
"""
from __future__ import annotations

import csv
import os

from .modefile import program_version


def header_lines(what: str, params, case_yaml: str, extra=None, varied=None):
    lines = [f"shearmix stability {what}", f"version: {program_version()}",
             f"convention: {params.convention}", f"parameters: {params.describe(varied)}",
             "modes: exp(i kx x + i kz z + sigma t) sum_n c_n exp(i (ky0 + n kf) y); "
             "growth = Re(sigma), frequency = |Im(sigma)|"]
    for k, v in (extra or {}).items():
        lines.append(f"{k}: {v}")
    lines.append("case:")
    lines.extend("  " + ln for ln in case_yaml.rstrip("\n").splitlines())
    return lines


def check_writable(path: str, force: bool, option: str):
    """Raise ValueError (one line) if ``path`` cannot be written; run before any work."""
    if path is None:
        return
    if os.path.exists(path) and not force:
        raise ValueError(f"{option}: {path} exists; pass --force to replace it")
    d = os.path.dirname(os.path.abspath(path))
    if not os.path.isdir(d):
        raise ValueError(f"{option}: folder {d} does not exist")


def write_csv(path: str, columns, rows, what, params, case_yaml, extra=None, force=False,
              varied=None):
    """Write ``rows`` (sequences matching ``columns``) under the provenance header."""
    check_writable(path, force, "output")
    tmp = path + ".part"
    with open(tmp, "w", newline="", encoding="utf-8") as fh:
        for ln in header_lines(what, params, case_yaml, extra, varied):
            fh.write("# " + ln + "\n")
        w = csv.writer(fh)
        w.writerow(columns)
        for r in rows:
            w.writerow([f"{v:.12g}" if isinstance(v, float) else v for v in r])
    os.replace(tmp, path)


def read_csv(path: str):
    """Comment lines and rows (dicts of strings) of a table written by :func:`write_csv`."""
    with open(path, encoding="utf-8") as fh:
        lines = fh.read().splitlines()
    comments = [ln[2:] for ln in lines if ln.startswith("#")]
    body = [ln for ln in lines if not ln.startswith("#")]
    return comments, list(csv.DictReader(body))
