"""Run by tests/solver/test_warmup.py in a fresh process (not collected by pytest).

    warmup_probe.py warm    kernels.warm_up() alone
    warmup_probe.py steps   the production paths (both models, product passes and
                            schemes, without and with a tracer; steps and
                            diagnostics) without warm_up

Prints, as JSON, the signatures every compiled kernel holds afterwards.
"""
import json
import sys

from shearmix.solver.case import case_from_dict
from shearmix.solver.compute import kernels


#: called by the other kernels only (compiled into them; whether it shows
#: signatures of its own depends on what the on-disk cache held)
INNER = ("_frame_nb",)


def signatures():
    return {name: sorted(str(sig) for sig in obj.signatures)
            for name, obj in sorted(vars(kernels).items())
            if name.endswith("_nb") and name not in INNER}


def production_paths():
    from shearmix.solver.run.simulation import Simulation
    kernels.warm_up = lambda: None    # the simulation's own call: what it compiles is measured
    for model, params in (("lowpe", {"Re": 50.0, "BPe": 1.0}),
                          ("boussinesq", {"Re": 50.0, "B": 1.0, "Pr": 1.0})):
        for product_pass in ("blocks", "whole"):
            for scheme in ("cb3c", "ars343"):
                # without and with a passive tracer (its stage update is compiled apart)
                for tracers in ({}, {"tracers": {"dye": {"Sc": 2.0}}}):
                    case = case_from_dict({
                        "model": model, "parameters": params,
                        "grid": {"Nx": 8, "Ny": 8, "Nz": 8},
                        "time": {"t_end": 1.0, "scheme": scheme},
                        "compute": {"fftw_effort": "estimate", "wisdom": "",
                                    "product_pass": product_pass}, **tracers})
                    sim = Simulation(case)
                    sim.advance()
                    sim.diagnostics()


if __name__ == "__main__":
    if sys.argv[1] == "warm":
        kernels.warm_up()
    else:
        production_paths()
    print(json.dumps(signatures()))
