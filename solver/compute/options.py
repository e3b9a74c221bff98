"""The engine's computational choices, built once from the case's ``compute.*`` keys.

None of them changes what is computed, only how (results equal to round-off,
and bit for bit on a given path): how the advection's products are made
(:mod:`shearmix.solver.compute.productpass`), how the slab transpose moves
data between ranks (:mod:`shearmix.solver.compute.transforms`), which kernels
run (:mod:`shearmix.solver.compute.kernels`), and the FFTW planning (the
FFTW threads, ``compute.threads``, are resolved with the machine's cores by
:func:`shearmix.solver.run.simulation.default_threads`).
docs/compute.md explains how to choose.
"""
from __future__ import annotations

from dataclasses import dataclass

#: ``compute.product_pass``: by the cache (auto), block by block, or whole arrays
PRODUCT_PASSES = ("auto", "blocks", "whole")
#: ``compute.transpose``: shared memory when all ranks share a node (auto), or always
#: ``Alltoall`` messages; ``shared`` insists on shared memory
TRANSPOSES = ("auto", "shared", "alltoall")
#: ``compute.kernels``: compiled (Numba, NumPy when it is not installed) or NumPy
KERNEL_BACKENDS = ("numba", "numpy")
FFTW_EFFORTS = ("estimate", "measure", "patient")
#: ``compute.wisdom``: where FFTW plans are cached between runs ('' for nowhere)
DEFAULT_WISDOM = "~/.cache/shearmix/fftw-wisdom"


class ComputeOptionError(ValueError):
    """A ``compute.*`` choice this machine or run cannot follow; the message is one line."""


@dataclass(frozen=True)
class ComputeOptions:
    """How the engine computes; the defaults reproduce its automatic choices."""

    product_pass: str = "auto"
    transpose: str = "auto"
    kernels: str = "numba"
    fftw_effort: str = "measure"
    wisdom: str = DEFAULT_WISDOM

    def __post_init__(self):
        for name, allowed in (("product_pass", PRODUCT_PASSES), ("transpose", TRANSPOSES),
                              ("kernels", KERNEL_BACKENDS), ("fftw_effort", FFTW_EFFORTS)):
            value = getattr(self, name)
            if value not in allowed:
                raise ComputeOptionError(f"compute.{name}: must be one of "
                                         f"{', '.join(allowed)}, got {value!r}")

    @classmethod
    def from_case(cls, case) -> "ComputeOptions":
        """The options of a validated :class:`shearmix.solver.case.Case`."""
        return cls(product_pass=case.get("compute.product_pass"),
                   transpose=case.get("compute.transpose"),
                   kernels=case.get("compute.kernels"),
                   fftw_effort=case.get("compute.fftw_effort"),
                   wisdom=case.get("compute.wisdom"))
