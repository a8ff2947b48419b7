"""The engine behind `reviewer batch`: Dask's distributed scheduler, in one of three set-ups.

- local: a LocalCluster of worker processes on this machine (one thread each), sized to the cores;
- scheduler: a running Dask scheduler (`dask scheduler` + `dask worker`s started by hand or by a job
  script), reached at its address;
- cluster: workers started through a job queue (Slurm, PBS, SGE) by dask-jobqueue.
Workers need the same Python environment and the movies (and the cache folder) on a shared path.
"""

from __future__ import annotations

import logging
import os
from collections.abc import Callable, Iterable
from dataclasses import dataclass, field

from reviewer.errors import BadInput

QUEUES = {"slurm": "SLURMCluster", "pbs": "PBSCluster", "sge": "SGECluster"}


@dataclass
class EngineChoice:
    workers: int | None = None
    scheduler: str | None = None
    cluster: str | None = None
    queue_options: dict = field(default_factory=dict)  # cores, memory, queue, walltime, jobs


def _import_distributed():
    try:
        import distributed
    except ImportError:
        raise BadInput("reviewer batch needs Dask: pip install -e '.[batch]' (dask and "
                       "distributed)") from None
    return distributed


def start(choice: EngineChoice):
    """(client, cluster or None). The caller closes both."""
    distributed = _import_distributed()
    if choice.scheduler:
        try:
            return distributed.Client(choice.scheduler, timeout="10s"), None
        except (OSError, TimeoutError) as exc:
            raise BadInput(f"--scheduler {choice.scheduler}: no Dask scheduler answered "
                           f"({exc})") from None
    if choice.cluster:
        try:
            import dask_jobqueue
        except ImportError:
            raise BadInput("--cluster needs dask-jobqueue: pip install -e '.[cluster]'") from None
        opts = dict(choice.queue_options)
        jobs = int(opts.pop("jobs", 1))
        cls = getattr(dask_jobqueue, QUEUES[choice.cluster])
        cluster = cls(processes=1, **{k: v for k, v in opts.items() if v is not None})
        cluster.scale(jobs=jobs)
        return distributed.Client(cluster), cluster
    n = choice.workers or os.cpu_count() or 1
    cluster = distributed.LocalCluster(n_workers=n, threads_per_worker=1, processes=True,
                                       dashboard_address=None, silence_logs=logging.ERROR)
    return distributed.Client(cluster), cluster


def run(client, tasks: Iterable[tuple], function: Callable, on_row: Callable[[int, dict], None],
        rows: list) -> None:
    """Submit function(*task) for every task; as each finishes put its row in rows[index] and call
    on_row(index, row). Ctrl-C cancels what has not finished (those rows stay None) and re-raises."""
    distributed = _import_distributed()
    tasks = list(tasks)
    futures = [client.submit(function, *t, pure=False) for t in tasks]
    index = {f.key: i for i, f in enumerate(futures)}
    try:
        for fut in distributed.as_completed(futures):
            i = index[fut.key]
            try:
                rows[i] = fut.result()
            except Exception as exc:  # noqa: BLE001 - a worker that died is one failed movie
                rows[i] = {"status": "failed", "error": f"worker failed: {exc}"}
            on_row(i, rows[i])
    except KeyboardInterrupt:
        client.cancel([f for f in futures if not f.done()])
        raise
