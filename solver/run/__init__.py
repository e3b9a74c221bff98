"""The run: the simulation and its time loop, the IMEX schemes, the outputs, restarts and stop signals."""
