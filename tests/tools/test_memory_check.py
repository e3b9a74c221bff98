"""The memory check: ``check`` warns and ``run`` refuses (exit 2, before allocating) when the
expected memory per node exceeds what the node has available; ``--no-memory-check``
overrides."""
import pytest

BIG = """
name: big
model: lowpe
parameters: {Re: 50, BPe: 1}
grid: {Nx: 4096, Ny: 4096, Nz: 4096}
time: {max_steps: 1}
compute: {fftw_effort: estimate, wisdom: ''}
"""

TINY = BIG.replace("4096", "16").replace("name: big", "name: tiny")

# this node reports 1 MiB available: no real case fits
SMALL_NODE = """
import shearmix.solver.sizing as sizing
sizing.node_memory = lambda *a, **k: {"available": 2 ** 20, "total": 2 ** 21}
"""


def test_meminfo_is_read_in_bytes(tmp_path):
    from shearmix.solver.sizing import node_memory
    # the layout of /proc/meminfo, values in kB (Linux proc(5) manual page)
    p = tmp_path / "meminfo"
    p.write_text("MemTotal:       24000000 kB\nMemFree:         1000000 kB\n"
                 "MemAvailable:   12000000 kB\n")
    assert node_memory(str(p)) == {"available": 12000000 * 1024, "total": 24000000 * 1024}
    real = node_memory()
    assert real is not None and 0 < real["available"] <= real["total"]
    # without the file: the page counts of POSIX sysconf
    import os
    page = os.sysconf("SC_PAGE_SIZE")
    assert node_memory(str(tmp_path / "absent"))["total"] == os.sysconf("SC_PHYS_PAGES") * page


def test_memory_per_node_shares_the_grid_among_the_ranks(tmp_path):
    from shearmix.solver.case import case_from_dict
    from shearmix.solver.sizing import LIBRARY_BYTES, derived, memory_per_node
    import yaml
    case = case_from_dict(yaml.safe_load(BIG))
    whole = derived(case, 8)["expected memory"]
    assert memory_per_node(case, 8, 8) == pytest.approx(whole)
    assert memory_per_node(case, 8, 2) == pytest.approx(
        (whole - 8 * LIBRARY_BYTES) / 4 + 2 * LIBRARY_BYTES)


def test_check_warns_when_the_grid_exceeds_the_node(cli_process, tmp_path):
    (tmp_path / "big.yaml").write_text(BIG)
    r = cli_process("check", "big.yaml", cwd=tmp_path)
    assert r.returncode == 0, r.stderr
    assert "warning: grid 4096 x 4096 x 4096: expected memory" in r.stdout
    assert "exceeds the" in r.stdout and "MiB available on this node" in r.stdout
    r = cli_process("check", "big.yaml", "--ranks", "4", "--ranks-per-node", "2", cwd=tmp_path)
    assert r.returncode == 0 and "(2 of 4 rank(s) on a node)" in r.stdout


def test_run_refuses_a_grid_larger_than_the_node_before_allocating(cli_process, tmp_path):
    (tmp_path / "big.yaml").write_text(BIG)
    r = cli_process("run", "big.yaml", "-o", "out", cwd=tmp_path)
    assert r.returncode == 2, r.stderr[-500:]
    assert r.stderr.count("\n") == 1 and "--no-memory-check" in r.stderr
    assert "exceeds the" in r.stderr
    assert not (tmp_path / "out").exists()


def test_no_memory_check_overrides_the_refusal(cli_process, tmp_path):
    (tmp_path / "tiny.yaml").write_text(TINY)
    r = cli_process("run", "tiny.yaml", "-o", "a", cwd=tmp_path, pre=SMALL_NODE)
    assert r.returncode == 2 and "exceeds the 1 MiB available" in r.stderr
    assert not (tmp_path / "a").exists()
    r = cli_process("run", "tiny.yaml", "-o", "a", "--no-memory-check", cwd=tmp_path,
                    pre=SMALL_NODE)
    assert r.returncode == 0, r.stderr
    assert (tmp_path / "a" / "timeseries.h5").exists()
