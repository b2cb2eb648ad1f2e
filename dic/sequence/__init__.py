"""Sequence stage: frames in order, reference updates, process pool and Dask; the crash-safe results file."""
