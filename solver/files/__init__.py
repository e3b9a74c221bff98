"""What a run writes and reads: file headers, slab-parallel HDF5 writes, checkpoints, snapshots, the time series and spectra."""
