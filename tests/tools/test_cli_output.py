"""What the program prints: no Python ``None`` for unset values, quiet when piped into ``head``."""
import os
import subprocess
import sys

CASE = """
name: quiet
model: lowpe
parameters: {Re: 40, BPe: 1}
grid: {Nx: 16, Ny: 16, Nz: 8}
time: {max_steps: 3, dt: 0.02, adaptive: false}
initial: {amplitude: 0.1}
output: {diagnostics_every: 1, progress_every: 100}
compute: {fftw_effort: estimate, wisdom: ''}
"""


def test_restart_names_unset_value_as_unset(monkeypatch, capsys, tmp_path):
    from shearmix.tools.cli import main
    monkeypatch.setenv("SHEARMIX_SERIAL", "1")
    monkeypatch.chdir(tmp_path)
    (tmp_path / "case.yaml").write_text(CASE)
    assert main(["run", "case.yaml", "-o", "out"]) == 0
    capsys.readouterr()
    assert main(["run", "case.yaml", "-o", "out", "--restart", "latest",
                 "--set", "parameters.Pe=0.1"]) == 0
    out = capsys.readouterr().out
    assert "changed: parameters.Pe unset -> 0.1" in out and "None" not in out


def test_info_history_names_unset_value_as_unset():
    """``shearmix info``: a key set at a restart was unset before; its history says so."""
    from shearmix.tools.fileinfo import _event
    text = _event({"event": "restart", "t": 1.0, "step": 10, "from": "ck.h5", "ranks_before": 1,
                   "ranks": 1, "version_before": "a", "version": "a",
                   "changes": {"parameters.Pe": [None, 0.1], "time.dt": [0.02, None]}})
    assert "changed parameters.Pe: unset -> 0.1, time.dt: 0.02 -> unset" in text
    assert "None" not in text


def test_piped_into_head_exits_quietly():
    # a reader that stops early closes the pipe: POSIX gives the writer EPIPE
    # (Python ignores SIGPIPE); closing the read end first makes it certain
    code = "import sys; from shearmix.tools.cli import main; sys.exit(main(sys.argv[1:]))"
    read_end, write_end = os.pipe()
    os.close(read_end)
    writer = subprocess.run([sys.executable, "-c", code, "keys"], stdout=write_end,
                            stderr=subprocess.PIPE, text=True, timeout=120,
                            env=dict(os.environ, SHEARMIX_SERIAL="1"))
    os.close(write_end)
    assert writer.stderr == ""
    assert writer.returncode == 141  # 128 + SIGPIPE, as the shell reports a writer it ended
