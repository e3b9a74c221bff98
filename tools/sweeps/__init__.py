"""Parameter sweeps: the sweep file, local launches, member status, the sweep table and fits, batch-job scripts."""
