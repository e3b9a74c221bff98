"""The issue's test: in a statistically stationary run, a tracer's diffusivity from its
flux and from its dissipation agree within their error bars.

Multiplying the tracer equation by ``c`` and averaging gives ``d/dt <c^2>/2 = -G <w c> -
chi_c`` exactly (docs/equations.md#tracers; the Osborn-Cox relation, Osborn & Cox 1972,
Geophys. Fluid Dyn. 3, 321): at equilibrium the time means of ``D_c = -<w c>/G`` and
``D_chi = chi_c/G^2`` agree. The engine evaluates the two from different parts of the
state (the flux from ``w`` and ``c``, the dissipation from ``|k|^2 |c_k|^2``), and the
summary averages them with its own steady-state detection and error bars
(docs/analysis.md). A real run: low-Peclet model, 32 x 16 x 16, Re = 10 in the unit
convention (turbulent from t ~ 15), to t = 80 (about 2000 steps, a few seconds).
"""
import math
import os
import subprocess
import sys

import pytest

from shearmix.tools.analysis.summary import summarize_run

CASE = """
name: tracer-equilibrium
model: lowpe
parameters: {Re: 10, BPe: 1}
forcing: {kf: 1, amplitude: unit}
box: {Lx: 4*pi, Ly: 2*pi, Lz: 2*pi}
grid: {Nx: 32, Ny: 16, Nz: 16}
time: {t_end: 80, cfl: 0.6, dt: 0.001, dt_max: 0.05}
initial: {kind: laminar_noise, amplitude: 0.01, seed: 7}
output: {diagnostics_every: 5, progress_every: 100000}
compute: {fftw_effort: estimate, wisdom: ''}
tracers:
  dye: {Sc: 1}
  salt: {Sc: 4, gradient: 0.5}
"""


@pytest.fixture(scope="module")
def run(tmp_path_factory):
    d = tmp_path_factory.mktemp("equilibrium")
    (d / "case.yaml").write_text(CASE)
    env = dict(os.environ, SHEARMIX_SERIAL="1")
    code = "import sys\nfrom shearmix.tools.cli import main\nsys.exit(main(sys.argv[1:]))"
    r = subprocess.run([sys.executable, "-c", code, "run", "case.yaml", "-o", "run"], cwd=d,
                       env=env, capture_output=True, text=True, timeout=300)
    assert r.returncode == 0, r.stderr
    return d / "run"


@pytest.mark.parametrize("name", ["dye", "salt"])
def test_flux_and_dissipation_diffusivities_agree_in_a_steady_run(run, name):
    row = summarize_run(run)
    assert not row["short"] and row["steady_reliable"] and row["flow"] == ""  # turbulent
    assert row["window"] > 40  # the run holds a stationary stretch of half its length or more
    dc, dchi = row[f"D_c.{name}"], row[f"D_chi.{name}"]
    ec, echi = row[f"D_c.{name}_err"], row[f"D_chi.{name}_err"]
    # not trivially true: both clearly nonzero, error bars a modest fraction of the value
    assert dc > 5 * ec and dchi > 5 * echi, (dc, ec, dchi, echi)
    assert ec < 0.3 * dc and echi < 0.3 * dchi
    # within 2 combined standard errors (a choice: about the 95% two-sided level)
    assert abs(dc - dchi) < 2 * math.hypot(ec, echi), (dc, ec, dchi, echi)
    assert abs(row[f"D_gap_z.{name}"]) < 2
    assert not [w for w in row["warnings"] if "combined standard errors" in w]


def test_summary_lists_the_tracers(run):
    env = dict(os.environ, SHEARMIX_SERIAL="1")
    code = "import sys\nfrom shearmix.tools.cli import main\nsys.exit(main(sys.argv[1:]))"
    r = subprocess.run([sys.executable, "-c", code, "summary", str(run)], env=env,
                       capture_output=True, text=True, timeout=120)
    assert r.returncode == 0, r.stderr
    assert "  tracer dye  (Sc 1, Pe_c 10, G 1)" in r.stdout
    assert "  tracer salt  (Sc 4, Pe_c 40, G 0.5)" in r.stdout
    lines = r.stdout.splitlines()
    at = lines.index("  tracer salt  (Sc 4, Pe_c 40, G 0.5)")
    assert [ln.split()[0] for ln in lines[at + 1:at + 5]] == ["D_c", "D_chi", "c_rms", "kmax_etaB"]
    assert "combined standard errors" not in r.stdout
    # the threshold from the command line: any nonzero gap exceeds 0
    r = subprocess.run([sys.executable, "-c", code, "summary", str(run), "--tracer-sigmas",
                        "0"], env=env, capture_output=True, text=True, timeout=120)
    assert r.returncode == 0, r.stderr
    assert r.stdout.count("combined standard errors (> 0)") == 2
    row = summarize_run(run)
    # Batchelor 1959: kmax eta_B = kmax eta_K / sqrt(Sc) for Sc = 4
    assert row["kmax_etaB.salt"] == pytest.approx(row["kmax_etaK"] / 2, rel=1e-12)
