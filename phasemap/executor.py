"""Executors: one interface for running independent chunks of a long job.

A long job (a phase map, a filling curve, a strain sweep, cluster-size scaling, Monte Carlo
runs) is cut into *chunks*: independent, deterministic tasks ``fn(task) -> result`` whose result
depends only on the task (no shared state, random streams seeded by the task). Any executor
then gives results identical to the serial run.

Executors (:func:`get_executor` spelling in parentheses):

- :class:`SerialExecutor` (``"serial"``): in this process, in order.
- :class:`ProcessExecutor` (``"processes"``, ``"processes:N"``): N local worker processes
  (default: every core), started with ``spawn`` (safe with the numba thread pool).
- :class:`DaskExecutor` (``"dask"``: a local Dask cluster; ``"tcp://host:8786"`` or
  ``"dask://host:8786"``: connect to a running scheduler). Needs the optional extra
  ``pip install "phasemap[dask]"``.

:func:`run_chunks` is what jobs call: it skips chunks already in a checkpoint store, submits the
rest, saves each result atomically as soon as it arrives (so a job killed at any moment
recomputes nothing that was finished), and drives one progress bar for the whole job in the
parent process, whichever workers compute the chunks.

Chunk functions must be importable module-level functions and their tasks picklable: worker
processes import phasemap afresh, so methods registered at run time in the parent (not built
in) are not known to them — use the serial executor for those.
"""

from __future__ import annotations

import os
from typing import Callable, Iterable

from .model import ConfigError

__all__ = ["Executor", "SerialExecutor", "ProcessExecutor", "AutoExecutor", "DaskExecutor", "get_executor", "run_chunks",
           "EXECUTORS"]

#: spellings accepted by :func:`get_executor` and :func:`run_chunks` ("auto" only there)
EXECUTORS = ("auto", "serial", "processes", "processes:N", "dask", "dask://HOST:PORT", "tcp://HOST:PORT")
#: "auto": a job whose remaining chunks would take longer than this (seconds, estimated from the
#: first chunk run in this process) goes to local processes on all cores
AUTO_PARALLEL_SECONDS = 20.0


class Executor:
    """Runs ``fn(task)`` for many tasks; results are returned to the caller as they finish."""

    name = "executor"
    workers = 1

    def imap_unordered(self, fn: Callable, tasks: dict, more: Callable | None = None) -> Iterable:
        """Yield ``(key, result)`` for every ``key, task`` of ``tasks`` as each finishes.

        ``more(key, result) -> {key: task}``: tasks unlocked by a finished one (e.g. the second
        stage of a job, which needs all of one group's first-stage results); they run by the
        same executor, before the tasks not yet started, and their results are yielded too.
        """
        raise NotImplementedError

    def close(self) -> None:
        """Release workers (idempotent)."""

    def __enter__(self):
        return self

    def __exit__(self, *exc):
        self.close()

    def describe(self) -> str:
        return f"{self.name} ({self.workers} worker{'s' if self.workers != 1 else ''})"


class SerialExecutor(Executor):
    """In this process, in key order."""

    name = "serial"

    def imap_unordered(self, fn, tasks, more=None):
        queue = list(tasks.items())
        while queue:
            key, task = queue.pop(0)
            part = fn(task)
            yield key, part
            if more is not None:
                queue[:0] = list(more(key, part).items())


def _exit_with_parent(parent: int, interval: float = 0.5) -> None:
    """Worker initializer: a daemon thread ends this worker as soon as its parent process is gone.

    A pool worker blocks on its task queue; when the parent is killed with SIGKILL the queue's
    write end stays open in the sibling workers (fork), so the workers would wait for ever
    (seen: forked Monte Carlo workers of a killed ``strain-sweep`` asleep 20 min later). The
    parent id changes to the reaper's when the parent dies; then the worker exits at once.
    """
    import threading
    import time

    def watch():
        while os.getppid() == parent:
            time.sleep(interval)
        os._exit(1)

    threading.Thread(target=watch, name="exit-with-parent", daemon=True).start()


def limit_threads(threads: int) -> None:
    """Run this process's compiled kernels (numba ``prange``) on at most ``threads`` threads.

    A pool of N workers on C cores gives each worker C // N threads, so N processes x the numba
    pool never oversubscribe the cores. Rows of a ``prange`` loop are independent, so the answers
    do not depend on the thread count.
    """
    try:
        import numba
    except ImportError:  # pragma: no cover - numba is a dependency
        return
    numba.set_num_threads(max(1, min(int(threads), numba.config.NUMBA_NUM_THREADS)))


def _init_worker(parent: int, threads: int | None) -> None:
    """Pool worker initializer: exit with the parent; cap the compiled kernels' threads."""
    _exit_with_parent(parent)
    if threads:
        limit_threads(threads)


def process_pool(workers: int, context: str = "spawn"):
    """A ``concurrent.futures`` process pool whose workers exit when this process dies.

    Every local pool of phasemap is made here (:class:`ProcessExecutor`, the chains of one
    Monte Carlo run), so no worker outlives a killed job. Spawned workers run their compiled
    kernels on ``cores // workers`` threads each (:func:`limit_threads`: no oversubscription);
    forked workers keep the parent's setting (starting numba's thread pool in a fork is unsafe).
    """
    import multiprocessing as mp
    from concurrent.futures import ProcessPoolExecutor

    threads = max(1, (os.cpu_count() or 1) // max(1, int(workers))) if context == "spawn" else None
    return ProcessPoolExecutor(workers, mp_context=mp.get_context(context), initializer=_init_worker,
                               initargs=(os.getpid(), threads))


class ProcessExecutor(Executor):
    """Local worker processes (``concurrent.futures``, spawn start method)."""

    name = "processes"

    def __init__(self, workers: int | None = None, context: str = "spawn"):
        self.workers = int(workers or os.cpu_count() or 1)
        self.context = context  # "fork" only for code that starts no threads before forking
        self._pool = None

    def _get(self):
        if self._pool is None:
            self._pool = process_pool(self.workers, self.context)
        return self._pool

    def imap_unordered(self, fn, tasks, more=None):
        from concurrent.futures import FIRST_COMPLETED, wait

        pool = self._get()
        queue = list(tasks.items())
        futs = {}  # at most one task per worker in flight: the queue's order (unlocked tasks first) holds
        try:
            while queue or futs:
                while queue and len(futs) < self.workers:
                    key, task = queue.pop(0)
                    futs[pool.submit(fn, task)] = key
                done, _ = wait(futs, return_when=FIRST_COMPLETED)
                for f in done:
                    key = futs.pop(f)
                    part = f.result()
                    yield key, part
                    if more is not None:
                        queue[:0] = list(more(key, part).items())
        finally:
            for f in futs:
                f.cancel()

    def close(self):
        if self._pool is not None:
            self._pool.shutdown(wait=True, cancel_futures=True)
            self._pool = None


class AutoExecutor(Executor):
    """``"auto"``: the first chunk runs in this process and is timed; when the chunks still to do
    would take longer than :data:`AUTO_PARALLEL_SECONDS`, they go to local processes on all cores.

    One instance serves every stage of a job (e.g. a strain sweep's plateau steps, then its
    critical strains): once processes are chosen the same pool runs the later stages; while the
    chunks stay here, each stage times its own first chunk again.
    """

    name = "auto"

    def __init__(self):
        self._ex = None

    @property
    def workers(self):
        return self._ex.workers if self._ex is not None else 1

    def imap_unordered(self, fn, tasks, more=None):
        import time

        todo = dict(tasks)
        if not isinstance(self._ex, ProcessExecutor) and todo:
            key = next(iter(todo))
            t0 = time.perf_counter()
            part = fn(todo.pop(key))
            spent = time.perf_counter() - t0
            yield key, part
            if more is not None:
                todo = {**more(key, part), **todo}
            cores = os.cpu_count() or 1
            if todo and cores > 1 and spent * len(todo) > AUTO_PARALLEL_SECONDS:
                self._ex = ProcessExecutor()
            else:
                self._ex = SerialExecutor()
        if todo:
            yield from self._ex.imap_unordered(fn, todo, more)

    def close(self):
        if self._ex is not None:
            self._ex.close()
            self._ex = None

    def describe(self) -> str:
        return "auto" if self._ex is None else f"auto: {self._ex.describe()}"


class DaskExecutor(Executor):
    """Dask distributed: a scheduler at ``address``, or a local cluster when ``address`` is None.

    ``local_kw`` go to ``distributed.LocalCluster`` (e.g. ``host="127.0.0.1"`` to stay on the
    loopback interface, ``n_workers``, ``threads_per_worker``).
    """

    name = "dask"

    def __init__(self, address: str | None = None, workers: int | None = None, **local_kw):
        try:
            from distributed import Client, LocalCluster
        except ImportError:
            raise ConfigError('executor "dask": Dask is not installed; pip install "phasemap[dask]"') from None
        self._cluster = None
        if address is None:
            kw = dict(n_workers=int(workers or os.cpu_count() or 1), threads_per_worker=1, processes=True,
                      dashboard_address=None)
            kw.update(local_kw)
            self._cluster = LocalCluster(**kw)
            self._client = Client(self._cluster)
        else:
            try:
                self._client = Client(address, timeout="10s")
            except (OSError, TimeoutError) as e:
                raise ConfigError(f"--scheduler: cannot reach the Dask scheduler at {address!r} ({e})") from None
        self.workers = max(1, len(self._client.scheduler_info().get("workers", {})))
        self.address = address or self._cluster.scheduler_address

    def imap_unordered(self, fn, tasks, more=None):
        from distributed import as_completed

        futs = {}
        for key, task in tasks.items():
            # pure=False: never merge two chunks that happen to hash alike
            futs[self._client.submit(fn, task, pure=False)] = key
        try:
            pending = as_completed(list(futs))
            for f in pending:
                key, part = futs[f], f.result()
                yield key, part
                for k, task in (more(key, part) if more is not None else {}).items():
                    nf = self._client.submit(fn, task, pure=False, priority=1)
                    futs[nf] = k
                    pending.add(nf)
        finally:
            for f in futs:
                f.cancel()

    def close(self):
        if getattr(self, "_client", None) is not None:
            self._client.close()
            self._client = None
        if getattr(self, "_cluster", None) is not None:
            self._cluster.close()
            self._cluster = None

    def describe(self) -> str:
        return f"dask at {self.address} ({self.workers} workers)"


def get_executor(spec: "str | Executor | None" = None, scheduler: str | None = None,
                 field: str = "executor") -> Executor:
    """An executor from its spelling (see :data:`EXECUTORS`); ``scheduler`` implies Dask.

    Raises
    ------
    ConfigError
        Unknown spelling, bad worker count, or Dask requested but not installed / unreachable.
    """
    if isinstance(spec, Executor):
        return spec
    if scheduler:
        return DaskExecutor(scheduler if "://" in scheduler else f"tcp://{scheduler}")
    spec = (spec or "serial").strip()
    if spec == "serial":
        return SerialExecutor()
    if spec == "auto":
        return AutoExecutor()
    if spec == "processes" or spec.startswith("processes:"):
        n = spec.partition(":")[2]
        if n and not (n.isdigit() and 1 <= int(n) <= 1024):
            raise ConfigError(f"{field}: worker count must be an integer 1..1024, got {n!r}")
        return ProcessExecutor(int(n) if n else None)
    if spec == "dask" or spec == "dask:local":
        return DaskExecutor(None)
    if spec.startswith("dask://"):
        return DaskExecutor("tcp://" + spec[len("dask://"):])
    if spec.startswith("tcp://"):
        return DaskExecutor(spec)
    raise ConfigError(f"{field}: unknown executor {spec!r}; allowed: {', '.join(EXECUTORS)}")


def run_chunks(fn: Callable, tasks: dict, executor: "Executor | str | None" = None, store=None,
               progress: bool = False, desc: str = "chunks", weights: dict | None = None,
               unit: str = "chunk", bar=None, more: Callable | None = None) -> dict:
    """Run ``fn(task)`` for every ``key, task`` of ``tasks``; returns ``{key: result}``.

    Parameters
    ----------
    store : object with ``load(key) -> result | None`` and ``save(key, result)``, optional
        Checkpoint (e.g. :class:`phasemap.store.ChunkStore`): finished chunks are loaded instead
        of recomputed, new ones saved (atomically) the moment they arrive.
    executor : Executor or str, optional
        Default serial. ``"auto"``: the first pending chunk runs in this process; if the others
        would take longer than :data:`AUTO_PARALLEL_SECONDS`, they go to local processes on all
        cores (the default for long jobs; results are identical either way).
    progress : bool
        One tqdm bar for the job (in this process), with the time left.
    weights : dict, optional
        Work per chunk for the bar (e.g. points per chunk); default 1 each.
    bar : tqdm-like, optional
        The job's own bar (a job of several stages keeps one bar): advanced by the weights of
        loaded and computed chunks, never closed here (``progress`` is then ignored).
    more : callable, optional
        ``more(key, result) -> {key: task}``: chunks unlocked by a finished (or loaded) one, run
        before the chunks not yet started (:meth:`Executor.imap_unordered`) and checkpointed
        like the others; the returned dict holds them too. Each key is unlocked once.
    """
    out = {}
    todo = {}
    weights = weights or {}
    own_bar = bar is None
    if bar is None and progress:
        from tqdm.auto import tqdm

        extra = sum(w for k, w in weights.items() if k not in tasks) if more is not None else 0  # unlocked ones
        bar = tqdm(total=sum(weights.get(k, 1) for k in tasks) + extra, desc=desc, unit=unit, leave=False)

    def arrived(key, part, new):
        out[key] = part
        if bar is not None:
            bar.update(weights.get(key, 1))
        if more is not None:
            unlock(more(key, part), new)

    def unlock(found, new):  # the chunks taken from the store count as finished at once
        for key, task in found.items():
            part = store.load(key) if store is not None else None
            if part is None:
                new[key] = task
            else:
                arrived(key, part, new)

    unlock(tasks, todo)
    own = not isinstance(executor, Executor)
    ex = None

    def after(key, part):  # a computed chunk: saved at once, then what it unlocks
        if store is not None:
            store.save(key, part)
        new = {}
        arrived(key, part, new)
        return new

    try:
        if todo:
            ex = AutoExecutor() if executor == "auto" else get_executor(executor)
        for _ in (ex.imap_unordered(fn, todo, after) if todo else ()):
            pass
    finally:
        if bar is not None and own_bar:
            bar.close()
        if own and ex is not None:
            ex.close()
    return {**{k: out[k] for k in tasks}, **{k: v for k, v in out.items() if k not in tasks}}
