"""Scheduling: the lazy global-mean series of every run computed in one dask graph.

Which scheduler runs it is chosen outside (`sensemble.compute`); here the graph is submitted once, with the
progress bar that suits the scheduler.
"""
from __future__ import annotations

import dask


def distributed_client():
    """The distributed client dask would compute on now, or None for a local scheduler."""
    try:
        from distributed import default_client
    except ImportError:  # pragma: no cover — distributed is a dependency
        return None
    try:
        return default_client()
    except ValueError:
        return None


def compute_all(collections: list, progress: bool) -> list:
    """One `dask.compute` for the whole batch, with the progress bar that suits the scheduler."""
    client = distributed_client()
    if client is None:
        if not progress:
            return list(dask.compute(*collections))
        from dask.diagnostics import ProgressBar

        with ProgressBar(minimum=1.0):
            return list(dask.compute(*collections))
    # dask's local ProgressBar sees nothing of a cluster: follow the futures instead
    futures = client.compute(collections)
    if progress:
        from distributed import progress as follow

        follow(futures)
    return client.gather(futures)


def compute_runs(lazy: dict, progress: bool) -> tuple[dict, dict]:
    """Compute all lazy series in one graph; on failure, isolate the failing runs one by one."""
    keys = list(lazy)
    try:
        values = compute_all([lazy[k] for k in keys], progress)
        return dict(zip(keys, values)), {}
    except Exception:  # noqa: BLE001 — isolate below, each failure becomes a recorded message
        results, errors = {}, {}
        for k in keys:
            try:
                results[k] = compute_all([lazy[k]], False)[0]
            except Exception as err:  # noqa: BLE001
                errors[k] = err
        return results, errors
