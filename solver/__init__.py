"""Engine of shearmix: forced stratified shear flow DNS in a triply periodic box.

The engine holds case loading and validation, the slab-decomposed grid and
transforms, the equations (as sets of terms), the IMEX Runge-Kutta stepper,
diagnostics and the files a run writes. It never imports ``tools``.
"""
from .version import __version__

__all__ = ["__version__"]
