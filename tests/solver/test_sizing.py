"""The memory estimate of `shearmix check` follows the product pass the run will choose."""
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
