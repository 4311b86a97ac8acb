"""Parameter sweeps on dask."""
