"""PBS worker jobs submitted from their log folder, so that their logs land there on a PBS server and on
slurm-wlm-torque's `qsub` stand-in alike.

dask-jobqueue writes the log folder into the job script (``#PBS -e DIR/``, ``#PBS -o DIR/``), which a PBS server
honours. The stand-in (a `qsub` that calls `sbatch`) never reads those lines: it passes `sbatch` its own
``-e NAME.e<id> -o NAME.o<id>``, relative to the folder `qsub` runs in, and a folder given as ``-e``/``-o`` on its
command line fails the job (seen here: SLURM's JobLaunchFailure). So the job is submitted from its log folder, with
its name on `qsub`'s command line as well as in the script (the same name: harmless on a PBS server); under both,
the logs are ``<log folder>/<job name>.e<id>`` and ``.o<id>``. Imported only for kind "pbs" (dask-jobqueue is the
optional `cluster` extra).
"""
from __future__ import annotations

import shlex

from dask_jobqueue.pbs import PBSJob


class LogFolderPBSJob(PBSJob):
    """dask-jobqueue's PBS job, submitted from its `log_directory` (where there is one) and named on `qsub`'s line."""

    async def _submit_job(self, script_filename):
        command = shlex.split(self.submit_command)
        if self.job_name:
            command += ["-N", self.job_name]
        return await self._call(command + [script_filename], cwd=self.log_directory)
