"""Progress lines fall on multiples of ``output.progress_every``, also after a restart (issue 14 item 11).

The cadence is counted from step 0 of the run, not from the restart: common practice
(a log that reads the same whether or not the run was interrupted), no source.
"""
import re

import pytest

CASE = """
name: cadence
model: lowpe
parameters: {Re: 40, BPe: 1}
grid: {Nx: 16, Ny: 16, Nz: 8}
time: {max_steps: 7, dt: 0.02, adaptive: false}
initial: {amplitude: 0.1}
output: {diagnostics_every: 1, progress_every: 4}
compute: {fftw_effort: estimate, wisdom: ''}
"""


@pytest.fixture
def shearmix(monkeypatch, capsys, tmp_path):
    from shearmix.tools.cli import main
    monkeypatch.setenv("SHEARMIX_SERIAL", "1")
    monkeypatch.chdir(tmp_path)
    (tmp_path / "case.yaml").write_text(CASE)

    def run(*args):
        capsys.readouterr()
        code = main(list(args))
        out, err = capsys.readouterr()
        assert code == 0, out + err
        return [int(s) for s in re.findall(r"^step\s+(\d+)\s", out, re.M)]
    return run


def test_progress_steps_are_multiples_of_the_cadence_after_restart(shearmix):
    assert shearmix("run", "case.yaml", "-o", "out") == [0, 4]
    # the run stopped at step 7 (its final checkpoint); 9 more steps reach step 16
    steps = shearmix("run", "case.yaml", "-o", "out", "--restart", "latest",
                     "--set", "time.max_steps=9")
    assert steps == [8, 12, 16]
