"""distributed's periodic checks, made less frequent for workers that run few, long tasks.

A batch's tasks read and reduce whole files (a tenth of a second to several seconds each), while distributed's
defaults suit interactive work on many tiny tasks: every worker samples its own stack every 10 ms (the
dashboard's profile), every server checks its event loop every 20 ms, its memory every 100 ms and the system's
use every 500 ms. Measured on the project's 2-core benchmark machine, an idle `processes` cluster of 2 workers
over 20 s: the process holding the scheduler, the nannies and the client used 3.6 % of a core and each worker
2.5 %; with `QUIET` 0.6 % and 0.2–0.3 %. (Under load the same checks stretch with the wall time of a batch.)

Only keys the user's own dask configuration leaves at distributed's defaults are changed (`quiet_settings`), and
the profile stays on when a dashboard is asked for (its Profile page reads it). Workers of a local cluster get the
settings from their nanny; workers in SLURM/PBS jobs read them from the job script (`job_script_exports`, as
``DASK_…`` environment variables, dask's own mechanism); workers started by the user (kind "address") keep theirs.
"""
from __future__ import annotations

import dask

PROFILE_KEY = "distributed.worker.profile.enabled"

#: dask config key → value for a batch's cluster (see the module's docstring)
QUIET = {
    PROFILE_KEY: False,
    "distributed.admin.tick.interval": "1s",  # event-loop health check; a blocked loop is still reported after 3 s
    "distributed.worker.memory.monitor-interval": "1s",  # pause/spill/terminate checks; a task holds ≤ 16 MB slabs
    "distributed.admin.system-monitor.interval": "2s",  # CPU, memory, network figures for the dashboard
}


def _distributed_defaults() -> dict:
    import distributed  # noqa: F401 — registers distributed's defaults with dask.config

    return dask.config.merge(*dask.config.defaults)


def quiet_settings(dashboard: bool = False) -> dict:
    """The `QUIET` keys that are still at distributed's defaults here (the user's config wins), as a dict."""
    defaults = _distributed_defaults()
    chosen = {}
    for key, value in QUIET.items():
        if key == PROFILE_KEY and dashboard:
            continue
        if dask.config.get(key, None) == dask.config.get(key, None, config=defaults):
            chosen[key] = value
    return chosen


def environment_name(key: str) -> str:
    """The environment variable dask reads for a config key (``DASK_`` + the key's parts joined by ``__``)."""
    return "DASK_" + "__".join(part.upper().replace("-", "_") for part in key.split("."))


def job_script_exports(settings: dict) -> list[str]:
    """Shell lines that give a job's worker processes these dask settings."""
    return [f"export {environment_name(key)}={value}" for key, value in settings.items()]
