"""FFTW threads per rank: the key, then OMP_NUM_THREADS, then the node's cores over its ranks."""
import os

from shearmix.solver.compute.parallel import SerialComm
from shearmix.solver.run.simulation import default_threads


class _Node(SerialComm):
    def __init__(self, ranks):
        self._ranks = ranks

    def ranks_on_node(self):
        return self._ranks


def test_key_wins_then_environment(make_case, monkeypatch):
    monkeypatch.setenv("OMP_NUM_THREADS", "3")
    assert default_threads(make_case(compute={"threads": 5}), _Node(1)) == 5
    assert default_threads(make_case(), _Node(1)) == 3


def test_default_fills_the_node_without_oversubscribing(make_case, monkeypatch):
    monkeypatch.delenv("OMP_NUM_THREADS", raising=False)
    # raising=False: the fake stands in on systems without the query too
    monkeypatch.setattr(os, "sched_getaffinity", lambda pid: set(range(8)), raising=False)
    case = make_case()
    assert default_threads(case, _Node(1)) == 8
    assert default_threads(case, _Node(2)) == 4
    assert default_threads(case, _Node(3)) == 2
    assert default_threads(case, _Node(16)) == 1
