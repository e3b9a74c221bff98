"""The memory estimate of `shearmix check` follows the product pass the run will choose."""
import pytest

from shearmix.solver.compute import productpass
from shearmix.solver.sizing import bytes_per_point, derived


def test_estimate_counts_the_arrays_of_each_pass():
    # whole arrays, low-Peclet, one rank: 6 registers + 2 real coefficient arrays
    # + planning buffer + 3 velocity + uu-ww + 5 product transforms (common practice: 8 B/pt
    # per complex half-spectrum or real array)
    assert bytes_per_point(2, 1, blocks=False) == 6 * 8 + 2 * 4 + 8 + 4 * 8 + 5 * 8
    # block-wise: no velocity arrays, one transform per product field
    assert bytes_per_point(2, 1, blocks=True) == 6 * 8 + 2 * 4 + 8 + 5 * 8
    assert bytes_per_point(3, 1, blocks=True) == 9 * 8 + 4 * 4 + 8 + 8 * 8
    # on several ranks: the shared transpose arrays
    assert bytes_per_point(3, 2, blocks=True) - bytes_per_point(3, 1, blocks=True) == 8 * 8
    assert bytes_per_point(2, 2, blocks=False) - bytes_per_point(2, 1, blocks=False) == 2 * 8


def test_check_reports_the_pass_the_cache_implies(make_case, monkeypatch):
    case = make_case(grid={"Nx": 128, "Ny": 128, "Nz": 128})
    monkeypatch.setattr(productpass, "last_level_cache_bytes", lambda: 32 * 2 ** 20)
    info = derived(case, 1)
    assert info["product pass"] == "block-wise"
    assert info["bytes per point"] == bytes_per_point(2, 1, blocks=True)
    monkeypatch.setattr(productpass, "last_level_cache_bytes", lambda: 2 ** 30)
    assert derived(case, 1)["product pass"] == "whole arrays"
    # a pass set in the case is the one reported, whatever the cache
    case = make_case(grid={"Nx": 128, "Ny": 128, "Nz": 128}, compute={"product_pass": "blocks"})
    assert derived(case, 1)["product pass"] == "block-wise"


def test_each_tracer_adds_its_registers_and_flux_transforms():
    # per tracer: 3 registers + 3 flux transforms (uc, vc, wc) of 8 B/pt; whole arrays add
    # the 3 flux fields on the grid; the |k|^2 and alpha tables (4 B/pt each) are shared
    # (solver/compute/kernels.py: the compiled follower update)
    for nf in (2, 3):
        # the full model's L[T, p] is the alpha table already
        assert bytes_per_point(nf, 1, True, 1) - bytes_per_point(nf, 1, True, 0) == \
            6 * 8 + (2 if nf == 2 else 1) * 4
        assert bytes_per_point(nf, 1, True, 2) - bytes_per_point(nf, 1, True, 1) == 6 * 8
        assert bytes_per_point(nf, 1, False, 2) - bytes_per_point(nf, 1, False, 1) == 9 * 8
        # several ranks, block-wise: one shared array per product field more
        assert bytes_per_point(nf, 2, True, 2) - bytes_per_point(nf, 2, True, 1) == 9 * 8


def test_check_counts_the_tracers_of_the_case(make_case):
    case = make_case(compute={"product_pass": "whole"},
                     tracers={"salt": {"Sc": 10.0, "gradient": 2.0},
                              "dye": {"Pe": 5.0, "initial": {"kind": "mode", "nz": 2}}})
    info = derived(case, 1)
    assert info["bytes per point"] == bytes_per_point(2, 1, blocks=False, tracers=2)
    # Re = 50 (conftest): Pe_c = Sc Re
    assert info["tracers"] == ["salt: Pe_c 500, Sc 10, G 2, initial zero",
                               "dye: Pe_c 5, Sc 0.1, G 1, initial mode (0, 0, 2), amplitude 0.1"]


@pytest.mark.parametrize("model,params", [("lowpe", {"Re": 400.0, "BPe": 1.0}),
                                          ("boussinesq", {"Re": 400.0, "B": 1.0, "Pr": 1.0})])
def test_tracer_memory_estimate_against_tracemalloc(make_case, model, params):
    """The bytes two tracers add, measured by Python's tracemalloc (which sees NumPy's and
    pyFFTW's allocations) over building a simulation and one step, against the estimate.
    Whole-array pass (no round-trip work blocks, which the estimate leaves out). The
    estimate counts 8 B/pt per complex half-spectrum array; the exact figure is
    16 (Nz/2 + 1)/Nz: 6 of the 9 arrays per tracer are spectral."""
    import gc
    import tracemalloc

    from shearmix.solver.run.simulation import Simulation
    shape = {"Nx": 32, "Ny": 32, "Nz": 64}
    n = 32 * 32 * 64

    def traced_peak(tracers):
        case = make_case(model=model, parameters=params, grid=shape,
                         time={"t_end": None, "max_steps": 2, "adaptive": False, "dt": 1e-3},
                         compute={"product_pass": "whole"}, **({"tracers": tracers} if tracers else {}))
        gc.collect()
        tracemalloc.start()
        sim = Simulation(case)
        sim.advance()
        peak = tracemalloc.get_traced_memory()[1]
        tracemalloc.stop()
        del sim
        gc.collect()
        return peak

    two = {"a": {"Sc": 1.0}, "b": {"Sc": 3.0}}
    traced_peak(two)  # compiled kernels loaded, caches filled
    per_tracer = (traced_peak(two) - traced_peak({})) / (2 * n)
    nf = 3 if model == "boussinesq" else 2
    model_bytes = (bytes_per_point(nf, 1, False, 2) - bytes_per_point(nf, 1, False, 0)) / 2
    exact = model_bytes + 6 * (16 * (64 // 2 + 1) / 64 - 8)
    # 1%: allocations that do not scale with the grid (measured 0.3%)
    assert abs(per_tracer - exact) < 0.01 * exact, (per_tracer, exact, model_bytes)
