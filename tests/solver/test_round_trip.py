"""The block-wise round trip (inverse, pointwise products, band-pruned forward)
against numpy.fft, and the tendency made by blocks against the whole-array pass."""
import numpy as np
import pytest

from shearmix.solver.compute import productpass, roundtrip
from shearmix.solver.compute.parallel import SerialComm
from shearmix.solver.compute.roundtrip import RoundTrip, block_planes
from shearmix.solver.compute.transforms import SlabTransform
from shearmix.solver.grid import Grid
from shearmix.solver.run.simulation import Simulation


def _products(blocks):
    a, b, c = blocks[0], blocks[1], blocks[2]
    blocks[3][...] = a * b
    blocks[4][...] = a * a - c * c
    np.multiply(b, c, out=c)   # an output written over an input


def _whole_arrays_trip(trip, inputs, outputs, pointwise):
    """A round trip from and into whole spectral arrays: its chunks copied out of
    ``inputs`` and back into ``outputs`` (as the NumPy product pass does)."""
    nkz = trip.fft.grid.nz_kept

    def start(chunks, lo, hi):
        for chunk, spec in zip(chunks, inputs):
            np.copyto(chunk, spec[:, lo:hi, :nkz])

    def finish(chunks, lo, hi):
        for chunk, spec in zip(chunks, outputs):
            np.copyto(spec[:, lo:hi, :nkz], chunk)

    trip(inputs, outputs, pointwise, finish, start)


@pytest.mark.parametrize("shape", [(12, 8, 10), (16, 18, 8)])
def test_round_trip_matches_numpy_inside_the_band(shape, monkeypatch):
    # blocks of two x-planes, so that the sweep really goes block by block
    monkeypatch.setattr(roundtrip, "BLOCK_BYTES", 2 * shape[1] * shape[2] * 8)
    grid = Grid(shape, (1.0, 2.0, 3.0))
    fft = SlabTransform(grid, SerialComm(), effort="estimate")
    trip = RoundTrip(fft, 5)
    assert block_planes(grid) == trip.plan.planes == 2
    rng = np.random.default_rng(5)
    nkz = grid.nz_kept
    spectra = [np.fft.rfftn(rng.standard_normal(shape)) for _ in range(3)]
    cy = grid.cutoff[1]
    for s in spectra:       # inputs zero outside the kept ky; past the kz cutoff unread
        s[:, :, nkz:] = 0
        s[:, cy + 1:shape[1] - cy, :] = 0
    fields = [np.fft.irfftn(s, s=shape, axes=(0, 1, 2)) for s in spectra]
    spec = [fft.empty_spectral() for _ in range(5)]
    for s, full in zip(spec, spectra):
        s[...] = full / np.prod(shape)   # normalised amplitudes, as the tendency's
        s[:, :, nkz:] = 1e3              # ... and never reads them
    _whole_arrays_trip(trip, spec[:3], spec, _products)
    u, v, w = fields
    expected = [u, v, v * w, u * v, u * u - w * w]
    keep = np.broadcast_to(grid.dealias, spec[0].shape)
    for got, field in zip(spec, expected):
        ref = np.fft.rfftn(field)   # numpy's FFT of the whole product is the reference
        assert np.abs(got - ref)[keep].max() < 1e-12 * np.abs(ref).max()
    assert (fft.count_round_trips, fft.count_inverse, fft.count_forward) == (1, 3, 5)
    assert fft.count_forward_band == 5


@pytest.mark.parametrize("chunk_bytes", [1, 10 ** 9])
def test_round_trip_hands_chunks_of_kept_rows_to_finish(monkeypatch, chunk_bytes):
    """With ``finish``: every kept ky row exactly once, in chunks of one row
    (smallest buffers) or whole kept runs, each chunk the numpy.fft transform of
    the products inside the 2/3-rule band."""
    shape = (12, 16, 10)
    monkeypatch.setattr(roundtrip, "BLOCK_BYTES", 2 * shape[1] * shape[2] * 8)
    monkeypatch.setattr(roundtrip, "CHUNK_BYTES", chunk_bytes)
    grid = Grid(shape, (1.0, 2.0, 3.0))
    fft = SlabTransform(grid, SerialComm(), effort="estimate")
    trip = RoundTrip(fft, 5)
    rng = np.random.default_rng(6)
    nkz, cy = grid.nz_kept, grid.cutoff[1]
    spectra = [np.fft.rfftn(rng.standard_normal(shape)) for _ in range(3)]
    for sp in spectra:
        sp[:, :, nkz:] = 0
        sp[:, cy + 1:shape[1] - cy, :] = 0
    u, v, w = (np.fft.irfftn(sp, s=shape, axes=(0, 1, 2)) for sp in spectra)
    refs = [np.fft.rfftn(f)[:, :, :nkz] for f in (u, v, v * w, u * v, u * u - w * w)]
    spec = [fft.empty_spectral() for _ in range(5)]
    for sp, full in zip(spec, spectra):
        sp[...] = full / np.prod(shape)
    seen = []

    def finish(chunks, lo, hi):
        assert len(chunks) == 5 and all(c.shape == (shape[0], hi - lo, nkz) for c in chunks)
        keep = np.broadcast_to(grid.keep_x[:, None, None], chunks[0].shape)
        for got, ref in zip(chunks, refs):
            assert np.abs(got - ref[:, lo:hi])[keep].max() < 1e-12 * np.abs(ref).max()
        seen.extend(range(lo, hi))

    def copy_in(chunks, lo, hi):
        for c, s in zip(chunks, spec):
            np.copyto(c, s[:, lo:hi, :nkz])

    trip(spec[:3], spec, _products, finish, copy_in)
    assert seen == list(np.flatnonzero(grid.keep_y))
    # the inputs made a chunk at a time (start): the same products
    made = []

    def start(chunks, lo, hi):
        assert len(chunks) == 3 and all(c.shape == (shape[0], hi - lo, nkz) for c in chunks)
        for c, full in zip(chunks, spectra):
            c[...] = full[:, lo:hi, :nkz] / np.prod(shape)
        made.extend(range(lo, hi))

    seen.clear()
    work = [fft.empty_spectral() for _ in range(5)]
    for w_ in work:
        w_[...] = 7.0   # work arrays only: what they hold is not read
    for sp in work[:3]:
        sp[:, ~grid.keep_y] = 0   # (but the rows outside the kept ky stay zero)
    trip(work[:3], work, _products, finish, start)
    assert made == seen == list(np.flatnonzero(grid.keep_y))
    widths = {hi - lo for lo, hi in trip.plan.chunks}
    assert widths == ({1} if chunk_bytes == 1 else {cy + 1, cy})


def test_round_trip_refuses_more_fields_than_planned():
    fft = SlabTransform(Grid((8, 8, 8), (1.0, 1.0, 1.0)), SerialComm(), effort="estimate")
    trip = RoundTrip(fft, 1)
    with pytest.raises(ValueError, match="round trip of 2 fields, planned for 1"):
        trip([fft.spectral], [fft.spectral, fft.empty_spectral()], None, None, None)


def _tendency_both_ways(make_case, model, params, kernels="numba"):
    out = {}
    for kind in ("whole", "blocks"):
        case = make_case(model=model, parameters=params, grid={"Nx": 16, "Ny": 8, "Nz": 12},
                         initial={"kind": "laminar_noise", "amplitude": 0.3, "seed": 4},
                         compute={"product_pass": kind, "kernels": kernels})
        sim = Simulation(case)
        assert sim.tendency.blocks == (kind == "blocks")
        sim.tendency.want_speed = True
        n = sim.tendency(sim.state.copy(), 0.0, np.empty_like(sim.state))
        out[kind] = (n.copy(), sim.tendency.cfl_rate, sim.tendency.max_speed,
                     sim.physical())
    return out


@pytest.mark.parametrize("kernels", ["numba", "numpy"])
@pytest.mark.parametrize("model,params", [("lowpe", {"Re": 50.0, "BPe": 2.0}),
                                          ("boussinesq", {"Re": 50.0, "B": 2.0, "Pr": 0.5})])
def test_tendency_by_blocks_equals_the_whole_array_pass(make_case, model, params, kernels):
    out = _tendency_both_ways(make_case, model, params, kernels)
    (nw, cw, sw, fw), (nb, cb, sb, fb) = out["whole"], out["blocks"]
    scale = np.abs(nw).max()
    assert scale > 1e-3
    assert np.abs(nb - nw).max() < 1e-12 * scale
    assert cw > 0 and abs(cb - cw) < 1e-12 * cw
    assert abs(sb - sw) < 1e-12 * sw
    for a, b in zip(fw, fb):
        if a is None:
            assert b is None
        else:
            assert np.abs(a - b).max() < 1e-12 * max(np.abs(a).max(), 1.0)


def test_steps_by_blocks_follow_the_whole_array_pass(make_case):
    states = {}
    for kind in ("whole", "blocks"):
        case = make_case(model="boussinesq", parameters={"Re": 80.0, "B": 1.0, "Pr": 1.0},
                         grid={"Nx": 16, "Ny": 16, "Nz": 8}, compute={"product_pass": kind},
                         initial={"kind": "laminar_noise", "amplitude": 0.3, "seed": 2})
        sim = Simulation(case)
        for _ in range(20):
            sim.advance()
        states[kind] = (sim.state.copy(), sim.t)
    (a, ta), (b, tb) = states["whole"], states["blocks"]
    assert ta == pytest.approx(tb, rel=1e-12)
    assert np.abs(a - b).max() < 1e-10 * np.abs(a).max()


def test_product_pass_follows_the_cache(monkeypatch):
    monkeypatch.setattr(productpass, "last_level_cache_bytes", lambda: 1000)
    assert productpass.choose_product_pass("auto", 1000) == "whole"
    assert productpass.choose_product_pass("auto", 1001) == "blocks"
    assert productpass.choose_product_pass("whole", 10 ** 12) == "whole"
    assert productpass.choose_product_pass("blocks", 1) == "blocks"


def test_tendency_counts_the_fields_of_all_ranks_on_the_node(make_case, monkeypatch):
    """5 product fields (low-Peclet) of the whole 16^3 grid on one rank: 163840 bytes."""
    case = make_case()
    for cache, kind in ((5 * 16 ** 3 * 8, "whole"), (5 * 16 ** 3 * 8 - 1, "blocks")):
        monkeypatch.setattr(productpass, "last_level_cache_bytes", lambda c=cache: c)
        assert Simulation(case).tendency.blocks == (kind == "blocks")


def test_cache_size_read_from_sysfs(tmp_path):
    for name, size in (("index0", "32K"), ("index2", "512K"), ("index3", "16384K")):
        (tmp_path / name).mkdir()
        (tmp_path / name / "size").write_text(size + "\n")
    assert productpass.last_level_cache_bytes(str(tmp_path)) == 16 * 1024 ** 2
    missing = str(tmp_path / "nothing")
    assert productpass.last_level_cache_bytes(missing) == productpass.DEFAULT_CACHE_BYTES


def test_cpu_lists_as_linux_writes_them():
    """The sysfs CPU-list format (Linux kernel docs, 'cpu-lists'; common practice)."""
    assert productpass.cpu_count_in_list("0-1\n") == 2
    assert productpass.cpu_count_in_list("0-3,8,10-11") == 7
    assert productpass.cpu_count_in_list("5") == 1


def test_reported_cache_capped_per_cpu_sharing_it(tmp_path):
    """A guest that sees 2 CPUs of a socket with a 480 MiB L3 (as one machine of
    docs/performance.md does) counts 2 x 4 MiB, as does one with a 32 MiB L3; a
    16 MiB L3 shared by 16 CPUs stays whole; a cache that does not list its
    CPUs is taken as reported."""
    cap = productpass.CACHE_CAP_PER_CPU
    assert cap == 4 * 1024 ** 2
    (tmp_path / "index3").mkdir()
    (tmp_path / "index3" / "size").write_text("491520K\n")
    assert productpass.last_level_cache_bytes(str(tmp_path)) == 480 * 1024 ** 2
    (tmp_path / "index3" / "shared_cpu_list").write_text("0-1\n")
    assert productpass.last_level_cache_bytes(str(tmp_path)) == 2 * cap
    (tmp_path / "index3" / "size").write_text("32768K\n")
    assert productpass.last_level_cache_bytes(str(tmp_path)) == 2 * cap
    (tmp_path / "index3" / "size").write_text("16384K\n")
    (tmp_path / "index3" / "shared_cpu_list").write_text("0-15\n")
    assert productpass.last_level_cache_bytes(str(tmp_path)) == 16 * 1024 ** 2


@pytest.mark.parametrize("scheme", ["cb3c", "ars343"])
def test_owned_output_zeroed_once_changes_nothing(make_case, scheme):
    """The chunked pass writes the zeros outside the kept ky of the stepper's own
    register once (and the low-storage stage copies the band only): the same
    states, bit for bit, as rezeroing and copying everything each time, with the
    low-storage driver and with the reference driver's fresh stage arrays."""
    case = make_case(model="boussinesq", parameters={"Re": 80.0, "B": 1.0, "Pr": 1.0},
                     grid={"Nx": 16, "Ny": 12, "Nz": 8}, time={"scheme": scheme},
                     compute={"product_pass": "blocks"},
                     initial={"kind": "laminar_noise", "amplitude": 0.3, "seed": 8})
    fast, plain = Simulation(case), Simulation(case)
    assert fast.tendency.chunked and fast.tendency.owned_output is fast._n0
    plain.tendency.owned_output = None
    if hasattr(plain.stepper, "_band"):
        plain.stepper._band = None
    for sim in (fast, plain):
        sim.add_mode(1, 1, 1, "poloidal", 0.3)
        for _ in range(4):
            sim.advance()
    assert np.abs(plain.state).max() > 0.05
    assert np.array_equal(fast.state, plain.state)


def test_forcing_in_a_dropped_row_does_not_pile_up(make_case):
    """A forcing wavenumber past the 2/3-rule cutoff (kf = 6 on Ny = 16, cutoff 5;
    case files refuse it, the tendency does not rely on that) lands in a row the
    chunked pass does not write: that row of the stepper's register is rezeroed
    every evaluation, so it holds one forcing, not several."""
    from shearmix.solver.physics.tendency import PseudoSpectralTendency
    from shearmix.solver.physics.terms import ShearForcing
    sim = Simulation(make_case(initial={"kind": "laminar_noise", "amplitude": 0.1, "seed": 3},
                               compute={"product_pass": "blocks"}))
    nl = PseudoSpectralTendency(sim.grid, sim.basis, sim.fft, sim.fields, sim.model.advection,
                                ShearForcing(F0=1.0, kf=6.0), product_pass="blocks")
    assert nl.chunked and nl._forcing_in_gaps
    assert not sim.tendency._forcing_in_gaps      # the case's own forcing is kept
    nl.owned_output = out = np.zeros_like(sim.state)
    idx, fa, _ = nl.forcing[0]
    assert not sim.grid.keep_y[idx[1]]
    for _ in range(3):
        nl(sim.state, 0.0, out)
    assert out[0][idx] == fa


def test_true_runs():
    from shearmix.solver.grid import true_runs
    assert true_runs(np.array([1, 1, 0, 0, 1], dtype=bool)) == [(0, 2), (4, 5)]
    assert true_runs(np.zeros(3, dtype=bool)) == []
    assert true_runs(np.ones(4, dtype=bool)) == [(0, 4)]
    grid = Grid((12, 16, 10), (1.0, 1.0, 1.0))
    assert true_runs(grid.keep_y) == [(0, grid.cutoff[1] + 1), (16 - grid.cutoff[1], 16)]
