"""Case files: the schema of every key, validation, derived quantities.

A case is a YAML mapping. Every key, its type, its allowed range and its
default live in :data:`SCHEMA` (the single source for validation, for
``shearmix check`` and for the README's key table). :func:`load_case` reads a
file, applies ``--set key=value`` overrides, checks everything before any work
starts and returns a :class:`Case`. Any problem raises :class:`CaseError`
with one line that names the file, the key and what is allowed.
"""
from __future__ import annotations

import ast
import copy
import difflib
import math
import operator
import os
import re
from dataclasses import dataclass, field
from typing import Any, Callable

import yaml

from shearmix.solver.compute.options import (DEFAULT_WISDOM, FFTW_EFFORTS, KERNEL_BACKENDS,
                                             PRODUCT_PASSES, TRANSPOSES)
from shearmix.solver.grid import dealias_cutoff

MODELS = ("boussinesq", "lowpe")
INITIAL_KINDS = ("laminar_noise", "laminar", "rest", "mode", "file", "eigenmode")
MODE_COMPONENTS = ("vortical", "poloidal", "T")
#: forcing conventions by name; the older spellings are still read
AMPLITUDE_NAMES = {"laminar": "laminar", "unit": "unit",
                   "unit-laminar": "laminar", "unit-forcing": "unit"}


class CaseError(ValueError):
    """A case file or override that cannot be run; the message is one line."""


@dataclass(frozen=True)
class Key:
    """One case-file key: its kind, default, allowed values and meaning."""

    kind: str  # 'float', 'int', 'bool', 'str', 'length', 'choice', 'amplitude'
    default: Any = None
    doc: str = ""
    lower: float | None = None
    lower_open: bool = False
    upper: float | None = None
    choices: tuple = ()
    optional: bool = True  # may be null / absent (model checks come later)

    def allowed(self) -> str:
        if self.kind == "choice":
            return "one of " + ", ".join(self.choices)
        if self.kind == "amplitude":
            return "'laminar' (F0 = kf^2/Re), 'unit' (F0 = 1) or a number >= 0"
        if self.kind == "bool":
            return "true or false"
        if self.kind == "str":
            return "a string"
        what = {"float": "a number", "int": "an integer",
                "length": "a length such as 6.28 or '2*pi'"}[self.kind]
        bounds = []
        if self.lower is not None:
            bounds.append(("> " if self.lower_open else ">= ") + _fmt(self.lower))
        if self.upper is not None:
            bounds.append("<= " + _fmt(self.upper))
        return what + (" " + " and ".join(bounds) if bounds else "")


def _fmt(x: float) -> str:
    return f"{x:g}"


#: Every key a case file may hold, with its default. ``None`` means "not set".
SCHEMA: dict[str, Key] = {
    "name": Key("str", "case", "name of the case, used for the run folder"),
    "model": Key("choice", None, "equations: full Boussinesq or low-Peclet limit",
                 choices=MODELS, optional=False),
    "parameters.Re": Key("float", None, "Reynolds number", lower=0, lower_open=True,
                         optional=False),
    "parameters.B": Key("float", None, "buoyancy parameter (boussinesq)", lower=0),
    "parameters.Pe": Key("float", None, "Peclet number (boussinesq: Pe or Pr; "
                         "lowpe: optional, for T and the validity check)",
                         lower=0, lower_open=True),
    "parameters.Pr": Key("float", None, "Prandtl number, Pe = Re*Pr (boussinesq)",
                         lower=0, lower_open=True),
    "parameters.BPe": Key("float", None, "B*Pe, stratification of the low-Peclet model",
                          lower=0),
    "forcing.kf": Key("float", 1.0, "forcing wavenumber; kf*Ly/(2 pi) must be a whole number",
                      lower=0, lower_open=True),
    "forcing.amplitude": Key("amplitude", "laminar", "forcing amplitude F0"),
    "box.Lx": Key("length", "4*pi", "streamwise box length", lower=0, lower_open=True),
    "box.Ly": Key("length", "2*pi", "cross-stream box length", lower=0, lower_open=True),
    "box.Lz": Key("length", "2*pi", "vertical box length", lower=0, lower_open=True),
    "grid.Nx": Key("int", 64, "grid points in x (even)", lower=4),
    "grid.Ny": Key("int", 32, "grid points in y (even)", lower=4),
    "grid.Nz": Key("int", 32, "grid points in z (even)", lower=4),
    "time.t_end": Key("float", None, "stop at this simulated time", lower=0, lower_open=True),
    "time.max_steps": Key("int", None, "stop after this many steps", lower=1),
    "time.wall_hours": Key("float", None, "stop after this wall-clock time (hours)",
                           lower=0, lower_open=True),
    "time.scheme": Key("choice", "cb3c", "IMEX Runge-Kutta scheme",
                       choices=("cb3c", "ars343")),
    "time.dt": Key("float", 1e-2, "first (or, if not adaptive, fixed) time step",
                   lower=0, lower_open=True),
    "time.adaptive": Key("bool", True, "adapt dt to the advective CFL number"),
    "time.cfl": Key("float", 0.5, "advective CFL number", lower=0, lower_open=True, upper=2.0),
    "time.dt_max": Key("float", 0.1, "ceiling on the adaptive time step",
                       lower=0, lower_open=True),
    "time.dt_min": Key("float", 1e-7, "a step below this is a collapse: the run stops",
                       lower=0, lower_open=True),
    "initial.kind": Key("choice", "laminar_noise", "initial state", choices=INITIAL_KINDS),
    "initial.amplitude": Key("float", 1e-3, "rms of the noise / amplitude of a mode or file "
                             "perturbation", lower=0),
    "initial.seed": Key("int", 1, "random seed of the noise", lower=0),
    "initial.noise_modes": Key("int", 4, "noise fills integer wave indices |n| <= this",
                               lower=1),
    "initial.path": Key("str", None, "perturbation file (kind: file, or eigenmode for a file "
                        "written by 'shearmix stability mode')"),
    "initial.mode.nx": Key("int", 1, "x wave index of the mode (kind: mode)"),
    "initial.mode.ny": Key("int", 0, "y wave index of the mode"),
    "initial.mode.nz": Key("int", 0, "z wave index of the mode"),
    "initial.mode.component": Key("choice", "vortical", "which amplitude carries the mode",
                                  choices=MODE_COMPONENTS),
    "output.directory": Key("str", None, "run folder (default runs/<name>)"),
    "output.diagnostics_every": Key("int", 10, "steps between time-series records", lower=1),
    "output.progress_every": Key("int", 100, "steps between progress lines", lower=1),
    "output.overwrite": Key("bool", False, "allow replacing an existing run folder's results"),
    "output.checkpoint_every": Key("float", None, "simulated time between checkpoints",
                                   lower=0, lower_open=True),
    "output.checkpoint_minutes": Key("float", None, "wall-clock minutes between checkpoints",
                                     lower=0, lower_open=True),
    "output.checkpoint_keep": Key("int", 3, "how many recent checkpoints to keep", lower=1),
    "output.snapshot_every": Key("float", None, "simulated time between field snapshots",
                                 lower=0, lower_open=True),
    "output.snapshot_single": Key("bool", False, "write snapshots in single precision"),
    "output.snapshot_stride": Key("int", 1, "keep every n-th grid point in snapshots", lower=1),
    "output.spectra_every": Key("float", None, "simulated time between energy spectra",
                                lower=0, lower_open=True),
    "compute.threads": Key("int", None, "FFTW threads per rank (default: OMP_NUM_THREADS, "
                           "else the node's cores over its ranks)", lower=1),
    "compute.fftw_effort": Key("choice", "measure", "FFTW planning effort",
                               choices=FFTW_EFFORTS),
    "compute.wisdom": Key("str", DEFAULT_WISDOM,
                          "FFTW wisdom cache file ('' disables it)"),
    "compute.product_pass": Key("choice", "auto", "how the advection's products are made: "
                                "blocks of x-planes, whole arrays, or auto (blocks when the "
                                "fields overflow the cache)", choices=PRODUCT_PASSES),
    "compute.transpose": Key("choice", "auto", "the slab transpose: node shared memory, "
                             "Alltoall messages, or auto (shared when all ranks share a node)",
                             choices=TRANSPOSES),
    "compute.kernels": Key("choice", "numba", "element-wise kernels: compiled (numba; numpy "
                           "when Numba is missing) or their NumPy definitions",
                           choices=KERNEL_BACKENDS),
}

SECTIONS = sorted({k.split(".")[0] for k in SCHEMA if "." in k})

#: kinds of a tracer's initial state
TRACER_INITIAL_KINDS = ("zero", "mode", "file")
#: a tracer's name: it names its datasets and series columns (c_rms.NAME ...)
TRACER_NAME = re.compile(r"^[A-Za-z][A-Za-z0-9_]*$")

#: the keys of one passive tracer, under ``tracers.NAME.`` (docs/equations.md#tracers)
TRACER_SCHEMA: dict[str, Key] = {
    "Pe": Key("float", None, "tracer Peclet number Pe_c (give Pe or Sc)", lower=0.0,
              lower_open=True),
    "Sc": Key("float", None, "Schmidt number Sc = Pe_c/Re (give Pe or Sc)", lower=0.0,
              lower_open=True),
    "gradient": Key("float", 1.0, "imposed uniform mean vertical gradient G"),
    "initial.kind": Key("choice", "zero", "initial tracer field", choices=TRACER_INITIAL_KINDS),
    "initial.amplitude": Key("float", 0.1, "amplitude of the mode (kind: mode) or factor on "
                             "the file's field (kind: file)", lower=0.0),
    "initial.nx": Key("int", 0, "x wave index of the mode (kind: mode)"),
    "initial.ny": Key("int", 0, "y wave index of the mode"),
    "initial.nz": Key("int", 1, "z wave index of the mode"),
    "initial.path": Key("str", None, "HDF5 file with a physical field 'c' (kind: file)"),
}


# ---------------------------------------------------------------- lengths
_OPS: dict[type, Callable] = {ast.Add: operator.add, ast.Sub: operator.sub,
                              ast.Mult: operator.mul, ast.Div: operator.truediv,
                              ast.Pow: operator.pow}


def parse_length(text: Any) -> float:
    """Evaluate a length: a number, or arithmetic on numbers and ``pi`` ('4*pi', '4pi')."""
    if isinstance(text, bool):
        raise ValueError("not a length")
    if isinstance(text, (int, float)):
        return float(text)
    if not isinstance(text, str):
        raise ValueError("not a length")
    src = text.strip().lower().replace("π", "pi")
    # '4pi' and '4 pi' are how people write it by hand
    src = re.sub(r"(\d)\s*(pi)", r"\1*\2", src)

    def ev(node):
        if isinstance(node, ast.Expression):
            return ev(node.body)
        if isinstance(node, ast.Constant) and isinstance(node.value, (int, float)):
            return float(node.value)
        if isinstance(node, ast.Name) and node.id == "pi":
            return math.pi
        if isinstance(node, ast.BinOp) and type(node.op) in _OPS:
            return _OPS[type(node.op)](ev(node.left), ev(node.right))
        if isinstance(node, ast.UnaryOp) and isinstance(node.op, (ast.USub, ast.UAdd)):
            v = ev(node.operand)
            return -v if isinstance(node.op, ast.USub) else v
        raise ValueError("not a length")

    try:
        return float(ev(ast.parse(src, mode="eval")))
    except (SyntaxError, ZeroDivisionError, TypeError, OverflowError) as exc:
        raise ValueError("not a length") from exc


# ---------------------------------------------------------------- YAML
class Lined(dict):
    """A YAML mapping that remembers the line of each key (``lines``) and its file."""

    lines: dict
    origin: str


# YAML 1.1 reads 1e6 (no dot) as a string; a plain (unquoted) scalar written as a
# number is a number here, while a quoted one stays a string (common practice, no source)
_FLOAT = re.compile(r"^[-+]?(\d[\d_]*\.?\d*|\.\d+)([eE][-+]?\d+)$")


class _Loader(yaml.SafeLoader):
    """Safe YAML loading that refuses duplicate keys and keeps each key's line."""

    origin = "<case>"

    def construct_mapping(self, node, deep=False):
        self.flatten_mapping(node)
        out = Lined()
        out.lines, out.origin = {}, self.origin
        for key_node, value_node in node.value:
            key = self.construct_object(key_node, deep=deep)
            try:
                hash(key)
            except TypeError:
                raise CaseError(f"{self.origin}: line {key_node.start_mark.line + 1}: "
                                f"key {key!r} is not a name") from None
            if key in out:
                raise CaseError(f"{self.origin}: line {key_node.start_mark.line + 1}: "
                                f"duplicate key {key!r} (first given at line "
                                f"{out.lines[key]}); give each key once")
            out[key] = self.construct_object(value_node, deep=deep)
            out.lines[key] = key_node.start_mark.line + 1
        return out


_Loader.add_implicit_resolver("tag:yaml.org,2002:float", _FLOAT, list("-+0123456789."))
_Loader.add_constructor("tag:yaml.org,2002:map", _Loader.construct_mapping)


def load_yaml(text: str, source: str = "<case>"):
    """Parse YAML text; duplicate keys and syntax errors raise :class:`CaseError` with the line."""
    loader = _Loader(text)
    loader.origin = source
    try:
        return loader.get_single_data()
    except yaml.YAMLError as exc:
        mark = getattr(exc, "problem_mark", None)
        where = f" at line {mark.line + 1}, column {mark.column + 1}" if mark else ""
        problem = getattr(exc, "problem", None) or str(exc).splitlines()[0]
        raise CaseError(f"{source}: not valid YAML{where}: {problem}") from None
    finally:
        loader.dispose()


def _where(node, key, source: str = "") -> str:
    """'line N: ', or 'line N of FILE: ' when read from another file than ``source``."""
    line = getattr(node, "lines", {}).get(key)
    if line is None:
        return ""
    return f"line {line}: " if node.origin == source else f"line {line} of {node.origin}: "


# ---------------------------------------------------------------- the case
@dataclass
class Case:
    """A validated case: the nested mapping with defaults filled, plus derived numbers.

    Parameters follow docs/equations.md (Models, Forcing). ``F0`` defaults to ``kf^2/Re``
    (laminar amplitude 1); the laminar amplitude is ``U_L = F0 Re / kf^2``.
    """

    raw: dict
    source: str = "<case>"
    warnings: list = field(default_factory=list)

    def get(self, dotted: str):
        node = self.raw
        for part in dotted.split("."):
            node = node[part]
        return node

    # physics
    @property
    def name(self) -> str:
        return self.raw["name"]

    @property
    def model(self) -> str:
        return self.raw["model"]

    @property
    def Re(self) -> float:
        return float(self.get("parameters.Re"))

    @property
    def Pe(self) -> float | None:
        p = self.raw["parameters"]
        if p.get("Pe") is not None:
            return float(p["Pe"])
        if p.get("Pr") is not None:
            return float(p["Pr"]) * self.Re
        return None

    @property
    def Pr(self) -> float | None:
        pe = self.Pe
        return None if pe is None else pe / self.Re

    @property
    def B(self) -> float | None:
        if self.model == "boussinesq":
            return float(self.get("parameters.B"))
        return None

    @property
    def BPe(self) -> float:
        if self.model == "lowpe":
            return float(self.get("parameters.BPe"))
        return self.B * self.Pe

    @property
    def kf(self) -> float:
        return float(self.get("forcing.kf"))

    @property
    def F0(self) -> float:
        amp = self.get("forcing.amplitude")
        if amp == "laminar":
            return self.kf ** 2 / self.Re
        if amp == "unit":
            return 1.0
        return float(amp)

    @property
    def U_L(self) -> float:
        """Laminar amplitude: the steady state is ``U_L sin(kf y) e_x``."""
        return self.F0 * self.Re / self.kf ** 2

    @property
    def convention(self) -> str:
        """The forcing convention, named by its ``forcing.amplitude`` keyword, and what it means."""
        amp = self.get("forcing.amplitude")
        if amp == "laminar":
            return "laminar (F0 = kf^2/Re, laminar amplitude 1)"
        if amp == "unit":
            return f"unit (F0 = 1, laminar amplitude Re/kf^2 = {self.U_L:g})"
        return f"F0 = {self.F0:g} (laminar amplitude F0 Re/kf^2 = {self.U_L:g})"

    # geometry
    @property
    def lengths(self) -> tuple[float, float, float]:
        b = self.raw["box"]
        return (parse_length(b["Lx"]), parse_length(b["Ly"]), parse_length(b["Lz"]))

    Lx = property(lambda self: self.lengths[0])
    Ly = property(lambda self: self.lengths[1])
    Lz = property(lambda self: self.lengths[2])

    @property
    def shape(self) -> tuple[int, int, int]:
        g = self.raw["grid"]
        return (int(g["Nx"]), int(g["Ny"]), int(g["Nz"]))

    Nx = property(lambda self: self.shape[0])
    Ny = property(lambda self: self.shape[1])
    Nz = property(lambda self: self.shape[2])

    @property
    def output_directory(self) -> str:
        d = self.get("output.directory")
        return d if d else os.path.join("runs", self.name)

    @property
    def tracers(self) -> tuple:
        """The case's passive tracers, in the order given (:class:`Tracer`)."""
        out = []
        for name, spec in (self.raw.get("tracers") or {}).items():
            Pe = spec["Pe"] if spec["Pe"] is not None else spec["Sc"] * self.Re
            out.append(Tracer(name, float(Pe), float(spec["gradient"]), dict(spec["initial"])))
        return tuple(out)

    def to_yaml(self) -> str:
        """The full case (defaults included) as YAML text, for every file written."""
        return yaml.safe_dump(self.raw, sort_keys=False, default_flow_style=False)

    def with_overrides(self, assignments: list[str] | dict) -> "Case":
        """A new validated case with ``key=value`` assignments applied."""
        raw = copy.deepcopy(self.raw)
        _apply_overrides(raw, assignments, self.source)
        return validate(raw, self.source)


# ---------------------------------------------------------------- loading
def load_case(path: str, overrides: list[str] | dict | None = None) -> Case:
    """Read, override and validate a case file; raise :class:`CaseError` on any problem."""
    try:
        with open(path, encoding="utf-8") as fh:
            text = fh.read()
    except OSError as exc:
        raise CaseError(f"{path}: cannot read case file ({exc.strerror})") from None
    return case_from_text(text, path, overrides)


def case_from_text(text: str, source: str = "<case>",
                   overrides: list[str] | dict | None = None) -> Case:
    """Parse YAML text into a validated :class:`Case`."""
    data = load_yaml(text, source)
    if data is None:
        raise CaseError(f"{source}: empty file; a case needs at least model, parameters.Re "
                        "and a stop condition (see 'shearmix keys')")
    if not isinstance(data, dict):
        raise CaseError(f"{source}: a case file must be a mapping of keys, "
                        f"got {type(data).__name__}")
    if overrides:
        _apply_overrides(data, overrides, source)
    return validate(data, source)


def case_from_dict(data: dict, source: str = "<dict>") -> Case:
    """Validate a nested mapping (as a case file would hold) into a :class:`Case`."""
    return validate(copy.deepcopy(data), source)


def _apply_overrides(data: dict, assignments, source: str) -> None:
    items = assignments.items() if isinstance(assignments, dict) else None
    if items is None:
        parsed = []
        for a in assignments:
            if "=" not in a:
                raise CaseError(f"--set {a!r}: expected key=value, e.g. parameters.Re=200")
            key, value = a.split("=", 1)
            try:
                parsed.append((key.strip(), load_yaml(value, f"--set {key.strip()}")))
            except CaseError:
                parsed.append((key.strip(), value))
        items = parsed
    for key, value in items:
        if key == "tracers" or key.startswith("tracers."):
            _set_tracer_key(data, key, value)
            continue
        if key not in SCHEMA:
            raise CaseError(f"--set {key}: unknown key{_suggest(key)}")
        set_dotted(data, key, value)


def _set_tracer_key(data: dict, key: str, value) -> None:
    """``--set tracers.NAME.KEY=V``; ``tracers.NAME=null`` removes a tracer and
    ``tracers=null`` all of them."""
    parts = key.split(".")
    if len(parts) == 1:
        if value not in (None, {}):
            raise CaseError("--set tracers: only tracers=null (remove every tracer) is "
                            "allowed; set tracers.NAME.KEY=VALUE")
        data.pop("tracers", None)
        return
    if len(parts) == 2:
        if value is not None:
            raise CaseError(f"--set {key}: give a key of the tracer, e.g. {key}.Sc=10, or "
                            f"{key}=null to remove it")
        if isinstance(data.get("tracers"), dict):
            data["tracers"].pop(parts[1], None)
        return
    sub = ".".join(parts[2:])
    if sub not in TRACER_SCHEMA:
        raise CaseError(f"--set {key}: unknown tracer key {sub!r}; allowed: "
                        f"{', '.join(TRACER_SCHEMA)}")
    if not isinstance(data.get("tracers"), dict):
        data["tracers"] = {}
    tracer = data["tracers"].get(parts[1])
    if not isinstance(tracer, dict):
        tracer = data["tracers"][parts[1]] = {}
    if sub == "Pe":  # one of the two: the one set now wins
        tracer.pop("Sc", None)
    elif sub == "Sc":
        tracer.pop("Pe", None)
    set_dotted(tracer, sub, value)


def set_dotted(data: dict, key: str, value) -> None:
    """``data['a']['b'] = value`` for ``key = 'a.b'``, making sections as needed."""
    node = data
    parts = key.split(".")
    for part in parts[:-1]:
        if not isinstance(node.get(part), dict):
            node[part] = {}
        node = node[part]
    node[parts[-1]] = value


def _suggest(key: str) -> str:
    near = difflib.get_close_matches(key, list(SCHEMA), n=1, cutoff=0.5)
    if not near:
        leaf = key.split(".")[-1]
        by_leaf = [k for k in SCHEMA if k.split(".")[-1].lower() == leaf.lower()]
        near = by_leaf[:1]
    return f" (did you mean {near[0]}?)" if near else ""


def _flatten(data: dict, prefix: str, out: dict, source: str, where: dict) -> None:
    for k, v in data.items():
        if not isinstance(k, str):
            raise CaseError(f"{source}: {_where(data, k, source)}key {k!r} is not a name")
        dotted = f"{prefix}{k}"
        if isinstance(v, dict) and dotted not in SCHEMA:
            if not any(s.startswith(dotted + ".") for s in SCHEMA):
                raise CaseError(f"{source}: {_where(data, k, source)}unknown key {dotted}"
                                f"{_suggest(dotted)}")
            _flatten(v, dotted + ".", out, source, where)
        else:
            if dotted not in SCHEMA:
                raise CaseError(f"{source}: {_where(data, k, source)}unknown key {dotted}"
                                f"{_suggest(dotted)}")
            out[dotted] = v
            where[dotted] = _where(data, k, source)


def _check_value(key: str, spec: Key, value: Any, source: str, where: str = ""):
    bad = CaseError(f"{source}: {where}{key}: must be {spec.allowed()}, got {value!r}")
    if value is None:
        return None
    kind = spec.kind
    if kind in ("float", "int", "amplitude") and isinstance(value, str):
        try:
            float(value)
        except ValueError:
            pass
        else:
            # a number in quotes is a string: a slip that would otherwise pass unseen
            raise CaseError(f"{source}: {where}{key}: must be {spec.allowed()}, got the "
                            f"string {value!r}; write the number without quotes")
    if kind == "bool":
        if not isinstance(value, bool):
            raise bad
        return value
    if kind == "str":
        if not isinstance(value, str):
            raise bad
        return value
    if kind == "choice":
        if value not in spec.choices:
            near = difflib.get_close_matches(str(value), spec.choices, n=1)
            hint = f" (did you mean {near[0]}?)" if near else ""
            raise CaseError(f"{source}: {where}{key}: must be {spec.allowed()}, got {value!r}{hint}")
        return value
    if kind == "amplitude":
        if value in AMPLITUDE_NAMES:
            return AMPLITUDE_NAMES[value]
        if isinstance(value, bool) or not isinstance(value, (int, float)) or value < 0 \
                or not math.isfinite(value):
            raise bad
        return float(value)
    if kind == "int":
        if isinstance(value, bool) or not isinstance(value, int):
            if isinstance(value, float) and value.is_integer():
                value = int(value)
            else:
                raise bad
        number = value
    elif kind == "float":
        if isinstance(value, bool) or not isinstance(value, (int, float)):
            raise bad
        value = float(value)
        number = value
    elif kind == "length":
        try:
            number = parse_length(value)
        except ValueError:
            raise bad from None
    else:  # pragma: no cover - schema error
        raise AssertionError(kind)
    if not math.isfinite(number):
        raise bad
    if spec.lower is not None and (number < spec.lower or (spec.lower_open and number == spec.lower)):
        raise bad
    if spec.upper is not None and number > spec.upper:
        raise bad
    return value


def validate(data: dict, source: str = "<case>") -> Case:
    """Check every key, fill defaults and check the model's parameters."""
    flat: dict[str, Any] = {}
    where: dict[str, str] = {}
    data = dict(data)
    tracers = _validate_tracers(data.pop("tracers", None), data.get("parameters") or {},
                                source)
    _flatten(data, "", flat, source, where)
    values = {}
    for key, spec in SCHEMA.items():
        v = _check_value(key, spec, flat.get(key), source, where.get(key, ""))
        values[key] = spec.default if v is None else v
    if values["model"] is None:
        raise CaseError(f"{source}: model: missing; must be one of {', '.join(MODELS)}")
    if values["parameters.Re"] is None:
        raise CaseError(f"{source}: parameters.Re: missing; must be a number > 0")

    model = values["model"]
    p = {k.split(".")[1]: values[k] for k in SCHEMA if k.startswith("parameters.")}
    if p["Pe"] is not None and p["Pr"] is not None:
        raise CaseError(f"{source}: parameters.Pe and parameters.Pr both given; "
                        "give one (Pe = Re*Pr)")
    if model == "boussinesq":
        if p["B"] is None:
            raise CaseError(f"{source}: parameters.B: missing; the boussinesq model needs "
                            "Re, B and Pe (or Pr)")
        if p["Pe"] is None and p["Pr"] is None:
            raise CaseError(f"{source}: parameters.Pe: missing; the boussinesq model needs "
                            "Pe or Pr")
        if p["BPe"] is not None:
            raise CaseError(f"{source}: parameters.BPe: belongs to model lowpe; the "
                            "boussinesq model takes B and Pe (or Pr)")
    else:
        if p["BPe"] is None:
            raise CaseError(f"{source}: parameters.BPe: missing; the lowpe model needs "
                            "Re and BPe")
        if p["B"] is not None:
            raise CaseError(f"{source}: parameters.B: belongs to model boussinesq; the "
                            "lowpe model takes BPe (and optionally Pe or Pr)")

    for axis in ("Nx", "Ny", "Nz"):
        if values[f"grid.{axis}"] % 2:
            raise CaseError(f"{source}: grid.{axis}: must be even, got {values[f'grid.{axis}']}")
    if all(values[k] is None for k in ("time.t_end", "time.max_steps", "time.wall_hours")):
        raise CaseError(f"{source}: time: no stop condition; set time.t_end, "
                        "time.max_steps or time.wall_hours")
    if values["time.dt_min"] >= values["time.dt_max"]:
        raise CaseError(f"{source}: time.dt_min: must be below time.dt_max "
                        f"({values['time.dt_max']:g}), got {values['time.dt_min']:g}")
    if values["initial.kind"] in ("file", "eigenmode") and not values["initial.path"]:
        raise CaseError(f"{source}: initial.path: missing; initial.kind "
                        f"'{values['initial.kind']}' needs the perturbation file's path")

    raw: dict = {}
    for key, value in values.items():
        node = raw
        parts = key.split(".")
        for part in parts[:-1]:
            node = node.setdefault(part, {})
        node[parts[-1]] = value
    if tracers:
        raw["tracers"] = tracers
    case = Case(raw=raw, source=source)

    lx, ly, lz = case.lengths
    turns = case.kf * ly / (2 * math.pi)
    if abs(turns - round(turns)) > 1e-9 or round(turns) < 1:
        raise CaseError(f"{source}: forcing.kf: kf*Ly/(2 pi) must be a whole number >= 1 "
                        f"so the forcing is periodic, got {turns:.6g}")
    if lx <= 2 * math.pi / case.kf * (1 + 1e-12):
        case.warnings.append(
            f"box.Lx = {lx:.6g} <= 2 pi/kf = {2 * math.pi / case.kf:.6g}: the box holds no "
            "streamwise wavenumber below kf, so the laminar flow cannot go unstable in it "
            "(classical Kolmogorov-flow result); 4 pi/kf is the usual choice")
    if values["initial.kind"] == "mode":
        for axis, n in zip("xyz", case.shape):
            idx = values[f"initial.mode.n{axis}"]
            if abs(idx) > dealias_cutoff(n) or (axis == "z" and idx < 0):
                raise CaseError(f"{source}: initial.mode.n{axis}: must lie within the dealiased "
                                f"band 0..{dealias_cutoff(n)} (|n| for x, y), got {idx}")
    for name, spec in tracers.items():
        ini = spec["initial"]
        if ini["kind"] == "mode":
            for axis, n in zip("xyz", case.shape):
                idx = ini[f"n{axis}"]
                if abs(idx) > dealias_cutoff(n) or (axis == "z" and idx < 0):
                    raise CaseError(f"{source}: tracers.{name}.initial.n{axis}: must lie within "
                                    f"the dealiased band 0..{dealias_cutoff(n)} (|n| for x, y), "
                                    f"got {idx}")
            if (ini["nx"], ini["ny"], ini["nz"]) == (0, 0, 0):
                raise CaseError(f"{source}: tracers.{name}.initial: the mode (0, 0, 0) is the "
                                "mean, which the tracer equation does not carry")
    if int(round(turns)) > dealias_cutoff(case.Ny):
        raise CaseError(f"{source}: grid.Ny: the forcing mode ky = kf needs Ny > "
                        f"{3 * int(round(turns))} after 2/3 dealiasing, got {case.Ny}")
    return case


def _validate_tracers(section, parameters: dict, source: str) -> dict:
    """The ``tracers`` section, checked and with defaults filled: ``{name: {...}}``."""
    if section is None:
        return {}
    if not isinstance(section, dict):
        raise CaseError(f"{source}: tracers: must be a mapping of tracer names to their keys "
                        f"(e.g. tracers: {{salt: {{Sc: 10}}}}), got {type(section).__name__}")
    out = {}
    for name, body in section.items():
        if not isinstance(name, str) or not TRACER_NAME.match(name):
            raise CaseError(f"{source}: tracers: {name!r} is not a tracer name (a letter, then "
                            "letters, digits or '_')")
        if name in TRACER_SCHEMA or name == "initial" or not isinstance(body, dict):
            raise CaseError(f"{source}: tracers.{name}: a tracer needs a name and its keys "
                            f"under it, e.g. tracers: {{salt: {{Sc: 10}}}}; got "
                            f"{name}: {body!r}")
        flat: dict = {}
        for k, v in body.items():
            if k == "initial" and isinstance(v, dict):
                flat.update({f"initial.{kk}": vv for kk, vv in v.items()})
            else:
                flat[str(k)] = v
        values = {}
        for k in flat:
            if k not in TRACER_SCHEMA:
                raise CaseError(f"{source}: tracers.{name}.{k}: unknown tracer key; allowed: "
                                f"{', '.join(TRACER_SCHEMA)}")
        for k, spec in TRACER_SCHEMA.items():
            v = _check_value(f"tracers.{name}.{k}", spec, flat.get(k), source)
            values[k] = spec.default if v is None else v
        if values["Pe"] is not None and values["Sc"] is not None:
            raise CaseError(f"{source}: tracers.{name}: Pe and Sc both given; give one "
                            "(Pe = Re*Sc)")
        if values["Pe"] is None and values["Sc"] is None:
            raise CaseError(f"{source}: tracers.{name}: needs its Peclet number Pe or its "
                            "Schmidt number Sc")
        if values["initial.kind"] == "file" and not values["initial.path"]:
            raise CaseError(f"{source}: tracers.{name}.initial.path: missing; initial.kind "
                            "'file' needs the field's file")
        entry = {"Pe": values["Pe"], "Sc": values["Sc"], "gradient": values["gradient"],
                 "initial": {k.split(".", 1)[1]: values[k] for k in TRACER_SCHEMA
                             if k.startswith("initial.")}}
        out[name] = entry
    return out


@dataclass(frozen=True)
class Tracer:
    """A passive scalar ``c`` with mean gradient ``G`` and Peclet number ``Pe``
    (docs/equations.md#tracers)."""

    name: str
    Pe: float
    G: float
    initial: dict

    @property
    def field(self) -> str:
        """Its field name in the state, checkpoints and snapshots."""
        return "c." + self.name


def key_table() -> list[tuple[str, str, str, str]]:
    """(key, default, allowed, meaning) rows for documentation and ``check``."""
    rows = []
    for key, spec in SCHEMA.items():
        default = "-" if spec.default is None else str(spec.default)
        rows.append((key, default, spec.allowed(), spec.doc))
    for key, spec in TRACER_SCHEMA.items():
        default = "-" if spec.default is None else str(spec.default)
        rows.append(("tracers.NAME." + key, default, spec.allowed(), spec.doc))
    return rows
