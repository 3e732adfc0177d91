"""Running a fleet on Dask: the client side of the map-reduce in :mod:`ident.fleet.tasks`.

Per arm and period the client submits the conditioning of the first log (its data set stays in
that worker's memory) and a summary of it; once it is settled, the other logs with its cutoff.
A log longer than the chunk length comes back as a head (read from the file's head only); the
client then submits one task per row-range chunk (independent tasks, so the scheduler spreads
them over the free workers: one huge log does not land on one worker), and when their summaries
are in, a settling task that judges them over the whole log; a log the chunks cannot take (a gap,
irregular sampling, clipped torques; or, said by the head, options or CSV text the chunks do not
handle) is conditioned again whole by one task, and a note says so (:attr:`FleetRun.notes`).
When every log of a period is settled, it plans the period (:func:`ident.fleet.tasks.plan_period`)
and submits the term-choice folds, one compression task per stretch of segment (scheduled where
the data set or chunk lives), the term choice and the fit. A period holding a chunked log is
folded as in the split mode (its chunks live on several workers). Only summaries, chunk heads,
compressed triangles and fit results travel; the client never holds samples.

Failures: a log that cannot be read or conditioned is reported by name and its period goes on
without it; a period that cannot be fitted is reported with arm and period; with ``strict`` the
first failure stops the run (:class:`ident.errors.IdentError`).

The period's work is driven by one class for both loops: :func:`run_serial` runs the very same
task functions in the same order in a plain loop in this process: the yardstick of the engine's
overhead in ``scripts/bench_fleet.py``.
"""

from __future__ import annotations

import contextlib
import logging
import os
import socket
import sys
from collections import deque
from dataclasses import dataclass, field
from urllib.parse import urlparse

from ..errors import IdentError, first_line
from ..progress import Progress
from . import tasks as T
from .catalog import Group

#: Periods kept in flight per worker thread (enough to keep every worker busy while the client
#: plans the next stage).
IN_FLIGHT = 3


@dataclass
class FleetRun:
    """Fits per (arm, period) label, the failures (:class:`ident.fleet.tasks.Failed`), task count,
    notes (logs read whole though long, and why), and per log cut into chunks the workers that
    conditioned them (addresses in file order; None in the plain loop)."""

    fits: dict = field(default_factory=dict)
    failures: list = field(default_factory=list)
    tasks: int = 0
    notes: list = field(default_factory=list)
    placement: dict = field(default_factory=dict)


@dataclass
class FitSettings:
    """What to fit: method, terms ("auto" or a tuple), the fit's keyword options, log options per
    log (a function of the catalog entry), the strictness, and the compression mode: exact (each
    period's stretches folded in time order, one carried state: bit for bit what ``ident fit``
    computes) or `split` (stretches folded apart in parallel and merged: equal up to rounding);
    `chunk_rows`: table logs longer than this many rows are cut into chunks of about as many
    (None: :data:`ident.fleet.tasks.CHUNK_ROWS`; 0: never); `selection`: the joint selection
    applied to every description (the keywords of :meth:`ident.fleet.tasks.ArmRef.of`: joints,
    locked, gravity)."""

    method: str = "consistent"
    terms: object = "auto"
    fit_options: dict = field(default_factory=dict)
    log_options: object = None
    strict: bool = False
    split: bool = False
    chunk_rows: int | None = None
    selection: dict = field(default_factory=dict)


def _jobs(group: Group, settings: FitSettings) -> list[T.LogJob]:
    opts = settings.log_options
    return [T.LogJob(e.log, T.ArmRef.of(e.description, **settings.selection), e.profile, dict(opts(e) if callable(opts) else (opts or {})), settings.chunk_rows)
            for e in group.entries]


def _reachable(address: str, timeout: float) -> None:
    """Refuse at once a tcp:// scheduler address nothing listens on (Dask would retry until its timeout)."""
    u = urlparse(address if "://" in address else f"tcp://{address}")
    if u.scheme not in ("tcp", "tls", "ws", "wss"):
        return
    if not u.hostname or not u.port:
        raise IdentError(f"--scheduler: '{address}' is not an address like tcp://host:8786")
    try:
        with socket.create_connection((u.hostname, u.port), timeout=timeout):
            pass
    except OSError as exc:
        raise IdentError(f"--scheduler {address}: cannot reach the scheduler ({exc.strerror or exc})") from None


@contextlib.contextmanager
def dask_client(scheduler: str | None = None, workers: int | None = None, timeout: float = 10.0):
    """A ``distributed.Client``: connected to `scheduler`, or to a LocalCluster of `workers`
    single-threaded worker processes (default: the machine's cores) started here and closed on exit."""
    from distributed import Client, LocalCluster

    if scheduler:
        _reachable(scheduler, timeout)
        try:
            client = Client(scheduler, timeout=timeout)
        except (OSError, TimeoutError) as exc:
            raise IdentError(f"--scheduler {scheduler}: cannot reach the scheduler ({first_line(exc)})") from None
        try:
            yield client
        finally:
            client.close()
        return
    n = workers or os.cpu_count() or 1
    cluster = LocalCluster(n_workers=n, threads_per_worker=1, processes=True, dashboard_address=None,
                           silence_logs=logging.ERROR)
    client = Client(cluster)
    try:
        yield client
    finally:
        client.close()
        cluster.close()


class _Log:
    def __init__(self, job: T.LogJob):
        self.job = job
        self.data: list = []  # the conditioned log, or its chunks in file order (futures or values)
        self.head = None  # a long log's chunk head while its chunks are out
        self.chunks: dict[int, dict] = {}
        self.summary: dict | None = None


class _Period:
    """One arm-period's work as it unfolds, the same whichever loop runs it: its first log is
    conditioned (a long one as a head, then chunks, then a settling step, or whole when its chunks
    cannot take it), then the others with the first one's cutoff; once every log is settled, the
    plan, the term-choice folds, the compression and the fit. `submit(fn, *args, tag=...)` runs
    or schedules one task; results of tagged tasks come back through :meth:`handle`."""

    def __init__(self, group: Group, settings: FitSettings, submit, run: FleetRun, quiet: bool):
        self.group, self.settings, self.submit, self.run, self.quiet = group, settings, submit, run, quiet
        self.logs = [_Log(j) for j in _jobs(group, settings)]
        self.arm = T.ArmRef.of(group.description, **settings.selection)
        self.first = None

    def start(self) -> None:
        self._condition(0)

    def _condition(self, k: int, whole: bool = False) -> None:
        log = self.logs[k]
        d = self.submit(T.condition_log, log.job, self.first, whole)
        log.data = [d]
        self.submit(T.describe_log, d, tag=(self, "log", k))

    def handle(self, kind: tuple, get) -> bool:
        """Take the result of a tagged task (`get()` returns it or raises); True when the period is done."""
        if kind[0] == "fit":
            g = self.group
            try:
                self.run.fits[(g.arm, g.period)] = get()
            except Exception as exc:  # noqa: BLE001
                _report(self.run, T.Failed(f"arm {g.arm}, period {g.period}", first_line(exc)), self.settings.strict, self.quiet)
            return True
        log = self.logs[kind[1]]
        try:
            s = get()
        except Exception as exc:  # noqa: BLE001 - a worker lost or a bug: this log is out
            s = {"failed": T.Failed(log.job.log, first_line(exc))}
        if kind[0] == "log" and "head" in s:
            log.head = s["head"]
            log.chunks = {}
            log.data = [self.submit(T.condition_chunk, log.head, i) for i in range(log.head.chunks)]
            for i, d in enumerate(log.data):
                self.submit(T.describe_log, d, tag=(self, "chunk", kind[1], i))
            return False
        if kind[0] == "chunk":
            log.chunks[kind[2]] = s
            if len(log.chunks) == len(log.data):
                self.submit(T.settle_log, self.arm, log.head, *(log.chunks[i] for i in range(len(log.data))),
                            tag=(self, "settle", kind[1]))
            return False
        log.head = None
        if "fallback" in s:
            self._note(s["note"])
            self._condition(kind[1], whole=True)
            return False
        for note in s.get("notes", ()):
            self._note(note)
        if "workers" in s:
            self.run.placement[log.job.log] = s["workers"]
        log.summary = s
        if kind[1] == 0:
            self.first = s
            for j in range(1, len(self.logs)):
                self._condition(j)
        if all(x.summary is not None for x in self.logs):
            return not self._second_stage()
        return False

    def _note(self, text: str) -> None:
        self.run.notes.append(text)
        if not self.quiet:
            sys.stderr.write(f"ident fleet: note: {text}\n")

    def _second_stage(self) -> bool:
        """Plan the period and submit its choice, compression and fit; False when nothing is left to fit."""
        run, settings, submit, g = self.run, self.settings, self.submit, self.group
        good = []
        for k, log in enumerate(self.logs):
            if "failed" in log.summary:
                _report(run, log.summary["failed"], settings.strict, self.quiet)
            else:
                good.append(k)
        if not good:
            _report(run, T.Failed(f"arm {g.arm}, period {g.period}", "no log of this period could be used"), settings.strict, self.quiet)
            self.logs = []
            return False
        sums = [self.logs[k].summary for k in good]
        datas = [self.logs[k].data for k in good]
        plan = T.plan_period(sums)
        # chunks of a log sit on several workers: a period holding one is folded as in the split mode
        split = settings.split or any("parts" in s for s in sums)
        terms = settings.terms
        if isinstance(terms, str) and terms == "auto":
            if split:
                parts = [submit(T.choice_parts_of, d, self.arm, plan.stride, None, span)
                         for s, ds in zip(sums, datas) for d, span in zip(ds, T.chunk_spans(s))]
            else:
                parts = [None]
                for ds in datas:
                    parts = [submit(T.choice_parts_of, ds[0], self.arm, plan.stride, parts[0])]
            terms = submit(T.choose_period_terms, self.arm, plan.total, plan.stride, *parts)
        keep = settings.fit_options.get("uncertainty", "blocks") == "blocks"
        sources = [src for s in sums for src in s["sources"]]
        warns = [w for s in sums for w in s["warnings"]]
        logs = [self.logs[k].job.log for k in good]
        options = sums[0]["options"] | {"cutoff": sums[0]["cutoff"]}
        work = [(ds, st) for ds, mine in zip(datas, plan.stretches) for st in mine]
        fit_args = (sources, logs, warns, options)
        if split:
            chunks = [submit(T.compress_stretch, ds[part], self.arm, terms, seg, a, b, ranges, plan.dt, keep)
                      for ds, (part, seg, a, b, ranges, _) in work]
            submit(T.fit_period, self.arm, terms, settings.method, settings.fit_options, plan.block, *fit_args, *chunks, joins=[st[5] for _, st in work], tag=(self, "fit"))
        else:
            state = None
            for ds, (part, seg, a, b, ranges, _) in work[:-1]:
                state = submit(T.continue_compression, ds[part], self.arm, terms, state, seg, a, b, ranges, plan.dt, plan.block, keep)
            ds, (part, seg, a, b, ranges, _) = work[-1]
            submit(T.fold_and_fit, ds[part], self.arm, terms, state, seg, a, b, ranges, plan.dt, plan.block, keep, settings.method,
                   settings.fit_options, *fit_args,
                   tag=(self, "fit"))
        self.logs = []  # the cluster keeps the data sets while tasks need them, no longer
        return True


def _report(run: FleetRun, failure: T.Failed, strict: bool, quiet: bool) -> None:
    run.failures.append(failure)
    if strict:
        raise IdentError(f"{failure.name}: {failure.message} (--strict stops at the first failure)")
    if not quiet:
        sys.stderr.write(f"ident fleet: failed: {failure.name}: {failure.message}\n")


def run_fleet(client, groups: list[Group], settings: FitSettings, progress: bool = True, quiet: bool = False) -> FleetRun:
    """Map-reduce every group on the cluster of `client`; returns a :class:`FleetRun`."""
    from distributed import as_completed

    run = FleetRun()
    ac = as_completed()
    tags = {}
    bar = Progress(1, "fleet", enabled=progress and not quiet)

    def submit(fn, *args, tag=None, **kw):
        f = client.submit(fn, *args, pure=False, **kw)
        run.tasks += 1
        tags[f.key] = (tag, f)
        ac.add(f)
        return f

    def start(g):
        _Period(g, settings, submit, run, quiet).start()

    # A window of periods in flight, not the whole fleet: each conditioned log waits in a worker's
    # memory until its period is fitted, so submitting everything at once would hold every log of
    # the fleet at the same time (memory, and garbage-collection time that grows with it).
    pending = list(groups)
    workers = max(1, sum(client.nthreads().values()))
    for _ in range(min(len(pending), IN_FLIGHT * workers)):
        start(pending.pop(0))

    def estimate_total():
        # the tasks so far, and as many again per period for the periods not started (a guess)
        per_period = max(run.tasks, 1) / max(len(groups) - len(pending), 1)
        return max(run.tasks + int(round(per_period * len(pending))), 1)

    bar.total = estimate_total()
    try:
        with bar:
            for done, f in enumerate(ac, start=1):
                tag, _ = tags.pop(f.key)
                bar.update(done)
                if tag is None:
                    continue
                if tag[0].handle(tag[1:], f.result) and pending:  # a period done: the next one starts
                    start(pending.pop(0))
                # no reference to a finished future may outlive its use: a future still held keeps its
                # result in the worker's memory, and a worker holding every fit of the fleet makes each
                # of its garbage collections (and so each later task) slower
                del f, tag
                bar.total = estimate_total()
    except BaseException:
        for _, fut in list(tags.values()):
            fut.cancel()
        raise
    return run


class _Raised:
    """A task's exception in the plain loop, passed on to the tasks that use its result (as Dask does)."""

    def __init__(self, exc: BaseException):
        self.exc = exc

    def get(self):
        raise self.exc


def run_serial(groups: list[Group], settings: FitSettings, quiet: bool = True) -> FleetRun:
    """The same work as :func:`run_fleet` in a plain loop in this process (no engine): the same
    period driver calls the same task functions, one after the other."""
    run = FleetRun()
    queue: deque = deque()

    def submit(fn, *args, tag=None, **kw):
        bad = next((x for x in args if isinstance(x, _Raised)), None)
        if bad is None:
            try:
                value = fn(*args, **kw)
            except Exception as exc:  # noqa: BLE001 - surfaces where its result is used, as on Dask
                value = _Raised(exc)
        else:
            value = bad
        run.tasks += 1
        if tag is not None:
            queue.append((tag, value))
        return value

    for g in groups:
        _Period(g, settings, submit, run, quiet).start()
        while queue:
            tag, value = queue.popleft()
            tag[0].handle(tag[1:], value.get if isinstance(value, _Raised) else (lambda v=value: v))
    return run
