"""How the work is done fast: distributed FFTs, the communicator, compiled kernels, the choice of product pass, the phase clock."""
