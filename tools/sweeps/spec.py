"""Sweep files: a base case and the parameters to vary, expanded into members.

A sweep file is a YAML mapping (see docs/sweeps.md)::

    sweep: bpe-scan                  # name (letters, digits, '-', '_', '.')
    base: ../configs/demo.yaml       # base case file, relative to this file
    # base_case: {model: lowpe, ...} # ... or the base case inline
    set: {time.t_end: 120}           # dotted case keys applied to every member
    vary:                            # dotted case key -> values
      parameters.BPe: {log: [0.1, 30], count: 6}
      parameters.Re: [20, 40]
    combine: product                 # or zip (all lists of equal length)
    chain: parameters.BPe            # optional, see below
    directory: bpe-scan              # members go here (relative to this file)
    launch: {ranks: 1, parallel: 2}  # defaults of 'shearmix sweep run'

Values of ``vary`` are a list, or a range: ``{from: a, to: b, count: n}``
(evenly spaced, both ends included), ``{from: a, to: b, step: s}``, or
``{log: [a, b], count: n}`` (``n`` values evenly spaced in ``log``; ``a, b > 0``).
``product`` takes every combination (the first key varies slowest);
``zip`` pairs the i-th values of every key.

``chain: KEY`` orders the members along ``KEY`` within each group of equal
other parameters; each member after the first starts from the equilibrated
state (latest checkpoint) of its predecessor instead of its own initial state.

Expansion (:func:`expand`) writes ``cases/<member>.yaml`` (a complete,
validated case) and creates ``runs/<member>/`` for each member, plus
``manifest.yaml``. Member names come from the varied parameters (last part of
the key and the value, e.g. ``BPe0.3-Re20``). Expanding again is safe: a
member whose run folder already holds results keeps its case file, and if
the new expansion would change that case the expansion stops with an error.
"""
from __future__ import annotations

import copy
import itertools
import math
import os
import re
import time

import yaml

from shearmix.solver.case import SCHEMA, CaseError, case_from_dict, load_yaml, set_dotted
from shearmix.solver.files.series import SERIES_FILE
from shearmix.solver.version import __version__

__all__ = ["SweepError", "Member", "Sweep", "load_sweep", "parameter_values", "expand",
           "read_manifest", "MANIFEST", "COMBINE"]

MANIFEST = "manifest.yaml"
COMBINE = ("product", "zip")
_TOP_KEYS = ("sweep", "base", "base_case", "set", "vary", "combine", "chain", "directory",
             "launch")
_LAUNCH_KEYS = ("ranks", "parallel")
_NAME = re.compile(r"^[A-Za-z0-9._-]+$")


class SweepError(ValueError):
    """A sweep file or manifest that cannot be used; the message is one line."""


class Member:
    """One run of a sweep.

    Attributes
    ----------
    name : str
    values : dict
        Varied key -> value.
    raw : dict
        The member's full case mapping (before validation).
    chain_from : str or None
        Name of the member whose state this one starts from.
    """

    def __init__(self, name, values, raw, chain_from=None):
        self.name, self.values, self.raw, self.chain_from = name, values, raw, chain_from

    def __repr__(self):
        return f"Member({self.name!r})"


class Sweep:
    """A loaded sweep file: its members and where they live.

    Attributes
    ----------
    name, source, directory : str
        Sweep name, path of the sweep file, members' folder (absolute).
    keys : list of str
        Varied keys, in file order.
    combine : str
    chain : str or None
    members : list of Member
    launch : dict
        ``ranks`` and ``parallel`` defaults.
    """

    def __init__(self, name, source, directory, keys, combine, chain, members, launch):
        self.name, self.source, self.directory = name, source, directory
        self.keys, self.combine, self.chain = keys, combine, chain
        self.members, self.launch = members, launch

    def case_path(self, member):
        return os.path.join(self.directory, "cases", f"{member.name}.yaml")

    def run_dir(self, member):
        return os.path.join(self.directory, "runs", member.name)

    def member(self, name):
        for m in self.members:
            if m.name == name:
                return m
        raise SweepError(f"{self.source}: no member named {name!r}; members: "
                         f"{', '.join(m.name for m in self.members)}")

    def chains(self):
        """Members grouped into chains (each a list in run order; one member each without chaining)."""
        if not self.chain:
            return [[m] for m in self.members]
        by_name = {m.name: m for m in self.members}
        heads = [m for m in self.members if m.chain_from is None]
        out = []
        for h in heads:
            seq, cur = [h], h
            while True:
                nxt = [m for m in self.members if m.chain_from == cur.name]
                if not nxt:
                    break
                cur = by_name[nxt[0].name]
                seq.append(cur)
            out.append(seq)
        return out


def _fail(source, key, what):
    raise SweepError(f"{source}: {key}: {what}")


def _number(source, key, v):
    if isinstance(v, str):
        try:
            float(v)
        except ValueError:
            pass
        else:
            _fail(source, key, f"must be a finite number, got the string {v!r}; write the "
                  "number without quotes")
    if isinstance(v, bool) or not isinstance(v, (int, float)) or not math.isfinite(v):
        _fail(source, key, f"must be a finite number, got {v!r}")
    return v


def parameter_values(spec, source="<sweep>", key="vary"):
    """Values of one varied key: a list, or a range mapping (module docstring).

    >>> parameter_values({"log": [0.1, 10], "count": 3})
    [0.1, 1.0, 10.0]
    """
    if isinstance(spec, list):
        if not spec:
            _fail(source, key, "empty list; give at least one value")
        return list(spec)
    if not isinstance(spec, dict):
        _fail(source, key, "must be a list of values or a range {from, to, count|step} "
              "or {log: [a, b], count}")
    allowed = {"from", "to", "count", "step", "log"}
    extra = set(spec) - allowed
    if extra:
        _fail(source, key, f"unknown range key {sorted(extra)[0]!r}; allowed: from, to, count, "
              "step, log")
    if "log" in spec:
        ends = spec["log"]
        if not (isinstance(ends, list) and len(ends) == 2):
            _fail(source, key, "log must be a list [first, last] of two positive numbers")
        a, b = (_number(source, key + ".log", v) for v in ends)
        if a <= 0 or b <= 0:
            _fail(source, key, f"log range needs positive ends, got [{a}, {b}]")
        n = _count(source, key, spec)
        if n == 1:
            return [float(a)]
        la, lb = math.log(a), math.log(b)
        vals = [math.exp(la + (lb - la) * i / (n - 1)) for i in range(n)]
        vals[0], vals[-1] = float(a), float(b)  # exact ends, no rounding drift
        return [_tidy(v) for v in vals]
    if "from" not in spec or "to" not in spec:
        _fail(source, key, "a range needs 'from' and 'to' (or 'log: [a, b]')")
    a = _number(source, key + ".from", spec["from"])
    b = _number(source, key + ".to", spec["to"])
    if ("count" in spec) == ("step" in spec):
        _fail(source, key, "a range needs exactly one of 'count' or 'step'")
    if "count" in spec:
        n = _count(source, key, spec)
        if n == 1:
            return [a]
        return [_tidy(a + (b - a) * i / (n - 1)) for i in range(n)]
    s = _number(source, key + ".step", spec["step"])
    if s == 0 or (b - a) / s < 0:
        _fail(source, key, f"step {s} does not lead from {a} to {b}")
    n = int(math.floor((b - a) / s + 1e-9)) + 1
    return [_tidy(a + s * i) for i in range(n)]


def _count(source, key, spec):
    n = spec.get("count")
    if isinstance(n, bool) or not isinstance(n, int) or n < 1:
        _fail(source, key, f"count must be an integer >= 1, got {n!r}")
    return n


def _tidy(v):
    """Round to 12 significant digits so 0.1*3 reads as 0.3 in names and files."""
    return float(f"{v:.12g}")


def _label(key, value):
    short = key.split(".")[-1]
    if isinstance(value, float):
        text = f"{value:.4g}"
    else:
        text = str(value)
    return f"{short}{text}"


def _get_dotted(raw, key):
    node = raw
    for part in key.split("."):
        if not isinstance(node, dict) or part not in node:
            return None
        node = node[part]
    return node


def _read_yaml(path, what):
    """YAML of a sweep or case file: duplicate keys refused, each key's line kept."""
    try:
        with open(path, encoding="utf-8") as fh:
            text = fh.read()
    except OSError as exc:
        raise SweepError(f"{path}: cannot read {what} ({exc.strerror})") from None
    try:
        return load_yaml(text, path)
    except CaseError as exc:
        raise SweepError(str(exc)) from None


def load_sweep(path):
    """Read and check a sweep file; every member's case is validated.

    Raises
    ------
    SweepError
        One line naming the file, the key and what is allowed.
    """
    path = os.path.abspath(path)
    data = _read_yaml(path, "sweep file")
    if not isinstance(data, dict):
        raise SweepError(f"{path}: a sweep file must be a mapping with keys {', '.join(_TOP_KEYS)}")
    for k in data:
        if k not in _TOP_KEYS:
            raise SweepError(f"{path}: unknown key {k!r}; allowed: {', '.join(_TOP_KEYS)}")
    here = os.path.dirname(path)
    name = data.get("sweep") or os.path.splitext(os.path.basename(path))[0]
    if not isinstance(name, str) or not _NAME.match(name):
        _fail(path, "sweep", f"name must use letters, digits, '-', '_' or '.', got {name!r}")
    if ("base" in data) == ("base_case" in data):
        raise SweepError(f"{path}: give exactly one of 'base' (a case file) or 'base_case' "
                         "(the case inline)")
    if "base" in data:
        if not isinstance(data["base"], str):
            _fail(path, "base", "must be the path of a case file")
        base_path = os.path.join(here, data["base"])
        base = _read_yaml(base_path, "base case file")
        if not isinstance(base, dict):
            raise SweepError(f"{base_path}: a case file must be a mapping of keys")
    else:
        base = data["base_case"]
        if not isinstance(base, dict):
            _fail(path, "base_case", "must be a mapping (a case inline)")
    base = copy.deepcopy(base)
    sets = data.get("set") or {}
    if not isinstance(sets, dict):
        _fail(path, "set", "must be a mapping of dotted case keys to values")
    for k, v in sets.items():
        if k not in SCHEMA:
            _fail(path, f"set.{k}", "not a case key (see 'shearmix keys')")
        set_dotted(base, k, v)

    vary = data.get("vary")
    if not isinstance(vary, dict) or not vary:
        _fail(path, "vary", "must map at least one dotted case key to its values")
    keys = list(vary)
    values = {}
    for k in keys:
        if k not in SCHEMA:
            _fail(path, f"vary.{k}", "not a case key (see 'shearmix keys')")
        values[k] = parameter_values(vary[k], path, f"vary.{k}")
    combine = data.get("combine", "product")
    if combine not in COMBINE:
        _fail(path, "combine", f"must be one of {', '.join(COMBINE)}, got {combine!r}")
    if combine == "zip":
        lengths = {len(v) for v in values.values()}
        if len(lengths) > 1:
            _fail(path, "vary", "combine: zip needs lists of equal length, got lengths "
                  + ", ".join(f"{k}: {len(v)}" for k, v in values.items()))
        combos = list(zip(*(values[k] for k in keys)))
    else:
        combos = list(itertools.product(*(values[k] for k in keys)))
    chain = data.get("chain")
    if chain is not None and chain not in keys:
        _fail(path, "chain", f"must be one of the varied keys ({', '.join(keys)}), got {chain!r}")

    members, seen = [], {}
    for combo in combos:
        vals = dict(zip(keys, combo))
        mname = "-".join(_label(k, v) for k, v in vals.items())
        if mname in seen:
            raise SweepError(f"{path}: vary: members {dict(seen[mname])} and {vals} get the same "
                             f"name {mname!r}; use values that differ in 4 significant digits")
        seen[mname] = vals
        raw = copy.deepcopy(base)
        for k, v in vals.items():
            set_dotted(raw, k, v)
        raw["name"] = f"{name}-{mname}"
        try:
            case_from_dict(raw, f"{path} (member {mname})")
        except CaseError as exc:
            raise SweepError(str(exc)) from None
        members.append(Member(mname, vals, raw))
    if chain:
        if case_from_dict(members[0].raw).get("time.t_end") is None:
            _fail(path, "chain", "needs time.t_end in the case: a chained member runs for "
                  "time.t_end beyond the state it starts from")
        _link_chain(members, keys, chain)

    launch = data.get("launch") or {}
    if not isinstance(launch, dict):
        _fail(path, "launch", "must be a mapping with keys ranks, parallel")
    for k, v in launch.items():
        if k not in _LAUNCH_KEYS:
            _fail(path, f"launch.{k}", f"unknown key; allowed: {', '.join(_LAUNCH_KEYS)}")
        if isinstance(v, bool) or not isinstance(v, int) or v < 1:
            _fail(path, f"launch.{k}", f"must be an integer >= 1, got {v!r}")
    launch = {"ranks": launch.get("ranks", 1), "parallel": launch.get("parallel", 1)}
    directory = data.get("directory", name)
    if not isinstance(directory, str) or not directory:
        _fail(path, "directory", "must be a folder path")
    directory = os.path.normpath(os.path.join(here, directory))
    return Sweep(name, path, directory, keys, combine, chain, members, launch)


def _link_chain(members, keys, chain):
    others = [k for k in keys if k != chain]
    groups = {}
    for m in members:
        groups.setdefault(tuple(repr(m.values[k]) for k in others), []).append(m)
    for group in groups.values():
        group.sort(key=lambda m: m.values[chain])
        for prev, cur in zip(group, group[1:]):
            cur.chain_from = prev.name


def _has_results(run_dir):
    return os.path.exists(os.path.join(run_dir, SERIES_FILE))


def expand(sweep, log=print):
    """Write the members' case files, create their run folders and the manifest.

    Returns
    -------
    list of str
        Names of the members whose case file was written (new or unchanged
        members without results).

    Raises
    ------
    SweepError
        If a member with results would get a different case (nothing is
        written in that case).
    """
    # check everything first so that an error leaves the folder untouched
    texts = {}
    for m in sweep.members:
        text = yaml.safe_dump(case_from_dict(m.raw).raw, sort_keys=False, default_flow_style=False)
        texts[m.name] = text
        cpath = sweep.case_path(m)
        if _has_results(sweep.run_dir(m)) and os.path.exists(cpath):
            with open(cpath, encoding="utf-8") as fh:
                written_text = fh.read()
            # the first line is our header comment; the rest is the case
            old = written_text.split("\n", 1)[1] if written_text.startswith("#") else written_text
            if old != text:
                raise SweepError(f"{cpath}: member {m.name} already has results and its case "
                                 "would change; undo the change or give the sweep a new "
                                 "'directory'")
    written = []
    os.makedirs(os.path.join(sweep.directory, "cases"), exist_ok=True)
    for m in sweep.members:
        os.makedirs(sweep.run_dir(m), exist_ok=True)
        if _has_results(sweep.run_dir(m)):
            continue
        with open(sweep.case_path(m), "w", encoding="utf-8") as fh:
            fh.write(f"# sweep {sweep.name}, member {m.name} (shearmix {__version__})\n")
            fh.write(texts[m.name])
        written.append(m.name)
    manifest = {
        "sweep": sweep.name,
        "source": sweep.source,
        "version": __version__,
        "expanded": time.strftime("%Y-%m-%dT%H:%M:%S%z"),
        "vary": sweep.keys,
        "combine": sweep.combine,
        "chain": sweep.chain,
        "members": [{"name": m.name, "case": os.path.relpath(sweep.case_path(m), sweep.directory),
                     "run": os.path.relpath(sweep.run_dir(m), sweep.directory),
                     "values": dict(m.values), "chain_from": m.chain_from}
                    for m in sweep.members],
    }
    with open(os.path.join(sweep.directory, MANIFEST), "w", encoding="utf-8") as fh:
        yaml.safe_dump(manifest, fh, sort_keys=False)
    log(f"sweep {sweep.name}: {len(sweep.members)} members in {sweep.directory} "
        f"({len(written)} case files written)")
    return written


def read_manifest(directory):
    """The manifest of an expanded sweep folder (a dict)."""
    path = os.path.join(directory, MANIFEST)
    data = _read_yaml(path, "sweep manifest")
    if not isinstance(data, dict) or "members" not in data:
        raise SweepError(f"{path}: not a sweep manifest (no 'members')")
    return data
