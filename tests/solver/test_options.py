"""The engine's choices come from the case (``compute.*``) through one options
object; the engine itself reads no environment variable for them."""
import os

import pytest

from shearmix.solver.compute import kernels
from shearmix.solver.compute.options import ComputeOptionError, ComputeOptions
from shearmix.solver.run.simulation import Simulation

SOLVER = os.path.join(os.path.dirname(__file__), "..", "..", "solver")


def test_defaults_are_the_automatic_choices(make_case):
    options = ComputeOptions.from_case(make_case())
    assert options == ComputeOptions(product_pass="auto", transpose="auto", kernels="numba",
                                     fftw_effort="estimate", wisdom="")
    with pytest.raises(AttributeError):
        options.kernels = "numpy"   # frozen: built once, read by the engine


@pytest.mark.parametrize("field,value", [("product_pass", "tiles"), ("transpose", "mpi"),
                                         ("kernels", "fast"), ("fftw_effort", "slow")])
def test_a_bad_option_names_its_key(field, value):
    with pytest.raises(ComputeOptionError, match=rf"^compute.{field}: must be one of .*{value}"):
        ComputeOptions(**{field: value})


def test_environment_does_not_steer_the_engine(make_case, monkeypatch):
    """The ``SHEARMIX_*`` switches are command-line defaults only (tools/cli.py)."""
    monkeypatch.setenv("SHEARMIX_PHYSICAL_PASS", "blocks")
    monkeypatch.setenv("SHEARMIX_PRODUCT_PASS", "blocks")
    monkeypatch.setenv("SHEARMIX_KERNELS", "numpy")
    try:
        sim = Simulation(make_case(compute={"product_pass": "whole"}))
        assert not sim.tendency.blocks
        assert kernels.use_numba() == kernels.HAVE_NUMBA
    finally:
        kernels.set_backend("numba")


def test_options_passed_in_win_over_the_case(make_case):
    sim = Simulation(make_case(compute={"product_pass": "whole"}),
                     options=ComputeOptions(product_pass="blocks", fftw_effort="estimate"))
    assert sim.tendency.blocks and sim.options.product_pass == "blocks"


def test_no_engine_module_reads_the_compute_switches():
    """Only SHEARMIX_SERIAL (whether to start MPI at all) is left in solver/."""
    found = []
    for folder, _, files in os.walk(SOLVER):
        for name in files:
            if name.endswith(".py"):
                text = open(os.path.join(folder, name), encoding="utf-8").read()
                for var in ("SHEARMIX_PHYSICAL_PASS", "SHEARMIX_PRODUCT_PASS",
                            "SHEARMIX_TRANSPOSE", "SHEARMIX_KERNELS"):
                    if var in text:
                        found.append((name, var))
    assert found == []


class _TwoRanksApart:
    """Two ranks that share no memory (as on two nodes): no shared arrays."""

    rank, size, is_mpi = 0, 2, True

    def ranks_on_node(self):
        return 1

    def node_shared_array(self, shape, dtype):
        return None


def test_shared_transpose_where_memory_cannot_be_shared_is_refused():
    from shearmix.solver.compute.transforms import SlabTransform
    from shearmix.solver.grid import Grid
    grid = Grid((8, 8, 8), (1.0, 1.0, 1.0), 0, 2)
    with pytest.raises(ComputeOptionError, match=r"^compute.transpose: shared needs all ranks "
                                                 r"on one node"):
        SlabTransform(grid, _TwoRanksApart(), effort="estimate", transpose="shared")
