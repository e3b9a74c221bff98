"""Linear stability of the laminar flow ``U_L sin(kf y) e_x`` (both models).

Modules, one idea each:

* :mod:`.params` - model parameters of the linear problem;
* :mod:`.operators` - block-tridiagonal Fourier-Galerkin matrices in ``y``
  (Craya-Herring basis, pressure eliminated, Bloch detuning ``ky0``);
* :mod:`.eigen` - leading eigenvalue, dense or sparse shift-invert, automatic
  truncation with a convergence report;
* :mod:`.maps` - growth-rate maps, the most unstable mode, neutral curves;
* :mod:`.boxfit` - the modes that fit a case's box, warnings, resolution hint;
* :mod:`.modefile` - an eigenmode as a perturbation file for the engine;
* :mod:`.tables` - CSV output with the case and program version;
* :mod:`.plots` - figures (matplotlib, imported only when asked for);
* :mod:`.cli` - the ``stability`` subcommand.

See ``docs/stability.md``.
"""
from .eigen import Eigen, solve, spectrum
from .maps import growth_map, most_unstable, neutral_curve, neutral_value
from .operators import build
from .params import FlowParams, params_from_case

__all__ = ["Eigen", "FlowParams", "build", "growth_map", "most_unstable", "neutral_curve",
           "neutral_value", "params_from_case", "solve", "spectrum"]
