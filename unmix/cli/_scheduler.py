"""Where the dask work of a command runs: shared ``--workers`` / ``--scheduler`` options.

Three modes give the same numbers:

* default: dask's threaded scheduler in this process (one thread per core);
* ``--workers N``: a :class:`distributed.LocalCluster` of ``N`` worker *processes* with one thread
  each, started for the run and closed after it;
* ``--scheduler ADDRESS``: a :class:`distributed.Client` connected to a running cluster
  (``tcp://host:8786``); the workers must see the same input and output paths.

A command decorates itself with :func:`scheduler_options` and wraps its work in
:func:`dask_scheduler`; it then computes through :meth:`SchedulerContext.compute`, which shows a
progress bar on a terminal (dask's ``ProgressBar`` locally, ``distributed.progress`` on a cluster).

Examples
--------
>>> import dask.array as da
>>> with dask_scheduler() as run:
...     total = run.compute(da.ones(10, chunks=5).sum(), progress=False)
>>> float(total)
10.0
"""

from __future__ import annotations

import contextlib
import sys
from collections.abc import Callable, Iterator
from dataclasses import dataclass, field
from typing import Any

import click
import dask

from ..errors import InputError

__all__ = ["scheduler_options", "dask_scheduler", "SchedulerContext", "show_progress_default"]


def scheduler_options(func: Callable) -> Callable:
    """Add ``--workers N`` and ``--scheduler ADDRESS`` to a click command (keyword args ``workers``, ``scheduler``)."""
    func = click.option(
        "--scheduler",
        "scheduler",
        metavar="ADDRESS",
        default=None,
        help="Run on a running dask.distributed cluster at ADDRESS (e.g. tcp://10.0.0.5:8786). "
        "Its workers must see the same input and output paths. Excludes --workers.",
    )(func)
    func = click.option(
        "--workers",
        "workers",
        type=click.IntRange(min=1),
        default=None,
        metavar="N",
        help="Start a local cluster of N worker processes (one thread each) for this run. "
        "Default: the threaded scheduler in this process, one thread per core.",
    )(func)
    return func


def show_progress_default() -> bool:
    """True when stderr is a terminal: progress bars are shown only to people, not to log files."""
    try:
        return sys.stderr.isatty()
    except (AttributeError, ValueError):
        return False


@dataclass
class SchedulerContext:
    """The scheduler a command computes on; created by :func:`dask_scheduler`.

    Attributes
    ----------
    mode : str
        ``"threads"``, ``"local-cluster"`` or ``"cluster"``.
    client : distributed.Client or None
        The client for the two distributed modes.
    address : str or None
        The scheduler address for the two distributed modes.
    """

    mode: str
    client: Any = None
    address: str | None = None
    n_workers: int | None = None
    _extra: dict = field(default_factory=dict)

    @property
    def distributed(self) -> bool:
        return self.client is not None

    def compute(self, *collections: Any, progress: bool | None = None) -> Any:
        """Compute dask collections on this scheduler; return one result or a tuple of results.

        Parameters
        ----------
        *collections : dask collections (arrays, delayed, xarray objects)
        progress : bool, optional
            Show a progress bar on stderr. Default: only when stderr is a terminal.
        """
        if progress is None:
            progress = show_progress_default()
        if self.client is None:
            # the threaded scheduler passed as a function: the string "threads" makes dask look for
            # a distributed client first, which imports distributed (a quarter second per run)
            import dask.threaded

            if progress:
                from dask.diagnostics import ProgressBar

                with ProgressBar(out=sys.stderr, dt=0.5):
                    results = dask.compute(*collections, scheduler=dask.threaded.get)
            else:
                results = dask.compute(*collections, scheduler=dask.threaded.get)
        else:
            futures = self.client.compute(list(collections))
            if progress:
                from distributed import progress as dist_progress

                dist_progress(futures)
                sys.stderr.write("\n")
            results = tuple(self.client.gather(futures))
        return results[0] if len(results) == 1 else results

    def describe(self) -> str:
        """A few words for summaries: ``threads``, ``local cluster of 2 processes``, ``cluster at ADDRESS``."""
        if self.mode == "threads":
            return "threads"
        if self.mode == "local-cluster":
            return f"local cluster of {self.n_workers} processes"
        return f"cluster at {self.address}"


@contextlib.contextmanager
def dask_scheduler(workers: int | None = None, scheduler: str | None = None) -> Iterator[SchedulerContext]:
    """Set up the scheduler for one run and tear it down afterwards.

    Parameters
    ----------
    workers : int, optional
        Start a ``LocalCluster(n_workers=workers, threads_per_worker=1, processes=True)``.
    scheduler : str, optional
        Address of a running scheduler to connect a ``Client`` to.

    Yields
    ------
    SchedulerContext
    """
    if workers is not None and scheduler is not None:
        raise InputError("--workers and --scheduler exclude each other; pass one of them")
    if workers is None and scheduler is None:
        # Set explicitly so that a distributed Client left over in the process is not picked up.
        with dask.config.set(scheduler="threads"):
            yield SchedulerContext(mode="threads")
        return

    import distributed

    if workers is not None:
        if workers < 1:
            raise InputError(f"--workers must be at least 1, got {workers}")
        cluster = distributed.LocalCluster(
            n_workers=workers,
            threads_per_worker=1,
            processes=True,
            dashboard_address=":0",  # a free port: several runs may share a machine
            silence_logs=40,
        )
        try:
            # Default client while the run lasts: xarray's NetCDF writer takes its lock from it.
            client = distributed.Client(cluster, set_as_default=True)
            try:
                with dask.config.set(scheduler=client.get):
                    yield SchedulerContext(
                        mode="local-cluster", client=client, address=cluster.scheduler_address, n_workers=workers
                    )
            finally:
                client.close()
        finally:
            cluster.close()
        return

    try:
        client = distributed.Client(scheduler, timeout="20s", set_as_default=True)
    except OSError as exc:
        raise InputError(
            f"cannot connect to the dask scheduler at {scheduler!r} ({exc}); check the address and that "
            "the scheduler is running, or drop --scheduler to run on this machine"
        ) from None
    try:
        with dask.config.set(scheduler=client.get):
            yield SchedulerContext(mode="cluster", client=client, address=scheduler, n_workers=None)
    finally:
        client.close()
