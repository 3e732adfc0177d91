"""Running a fleet on Dask: the client side of the map-reduce in :mod:`ident.fleet.tasks`.

Per arm and period the client submits one conditioning task per log (its data set stays in that
worker's memory; the later logs take the first log's cutoff) and a summary of each.
When a period's summaries are in, it plans the period (:func:`ident.fleet.tasks.plan_period`) and
submits the term-choice folds, one compression task per stretch of segment (scheduled where the
data set lives), the term choice and the fit. Only summaries, compressed triangles and fit
results travel; the client never holds samples.

Failures: a log that cannot be read or conditioned is reported by name and its period goes on
without it; a period that cannot be fitted is reported with arm and period; with ``strict`` the
first failure stops the run (:class:`ident.errors.IdentError`).

:func:`run_serial` runs the very same task functions in a plain loop in this process: the
yardstick of the engine's overhead in ``scripts/bench_fleet.py``.
"""

from __future__ import annotations

import contextlib
import logging
import os
import socket
import sys
from dataclasses import dataclass, field
from urllib.parse import urlparse

from ..errors import IdentError, first_line
from ..estimation.selection import merge_parts
from ..progress import Progress
from . import tasks as T
from .catalog import Group

#: Periods kept in flight per worker thread (enough to keep every worker busy while the client
#: plans the next stage).
IN_FLIGHT = 3


@dataclass
class FleetRun:
    """Fits per (arm, period) label, the failures (:class:`ident.fleet.tasks.Failed`), task count."""

    fits: dict = field(default_factory=dict)
    failures: list = field(default_factory=list)
    tasks: int = 0


@dataclass
class FitSettings:
    """What to fit: method, terms ("auto" or a tuple), the fit's keyword options, log options per
    log (a function of the catalog entry), the strictness, and the compression mode: exact (each
    period's stretches folded in time order, one carried state: bit for bit what ``ident fit``
    computes) or `split` (stretches folded apart in parallel and merged: equal up to rounding)."""

    method: str = "consistent"
    terms: object = "auto"
    fit_options: dict = field(default_factory=dict)
    log_options: object = None
    strict: bool = False
    split: bool = False


def _jobs(group: Group, settings: FitSettings) -> list[T.LogJob]:
    opts = settings.log_options
    return [T.LogJob(e.log, e.description, e.profile, dict(opts(e) if callable(opts) else (opts or {}))) for e in group.entries]


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


class _Period:
    def __init__(self, group: Group, jobs):
        self.group, self.jobs = group, jobs
        self.data = []
        self.summaries: dict[int, dict] = {}
        self.fit = None


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
    kinds = {}
    bar = Progress(1, "fleet", enabled=progress and not quiet)

    def submit(fn, *args):
        f = client.submit(fn, *args, pure=False)
        run.tasks += 1
        return f

    def watch(f, kind, p=None):
        kinds[f.key] = (kind, p, f)
        ac.add(f)

    def start(g):
        jobs = _jobs(g, settings)
        p = _Period(g, jobs)
        first = None
        for k, job in enumerate(jobs):
            d = submit(T.condition_log, job, first)
            p.data.append(d)
            s = submit(T.describe_log, d)
            first = s if k == 0 else first
            watch(s, ("summary", k), p)
        for d in p.data:
            watch(d, ("other", None), p)

    # A window of periods in flight, not the whole fleet: each conditioned log waits in a worker's
    # memory until its period is fitted, so submitting everything at once would hold every log of
    # the fleet at the same time (memory, and garbage-collection time that grows with it).
    pending = list(groups)
    workers = max(1, sum(client.nthreads().values()))
    for _ in range(min(len(pending), IN_FLIGHT * workers)):
        start(pending.pop(0))
    # the bar's total: the tasks of the periods started so far, scaled to the whole fleet
    per_period = max(run.tasks, 1) / max(len(groups) - len(pending), 1)

    def estimate_total():
        return max(run.tasks + int(round(per_period * len(pending))), 1)

    bar.total = estimate_total()
    try:
        with bar:
            for done, f in enumerate(ac, start=1):
                kind, p, _ = kinds.pop(f.key)
                bar.update(done)
                if kind[0] == "summary":
                    try:
                        p.summaries[kind[1]] = f.result()
                    except Exception as exc:  # noqa: BLE001 - a worker lost or a bug: this log is out
                        p.summaries[kind[1]] = {"failed": T.Failed(p.jobs[kind[1]].log, first_line(exc))}
                    if len(p.summaries) == len(p.jobs):
                        new = _second_stage(run, p, settings, submit, quiet)
                        for nf in new:
                            watch(nf, ("fit", None) if nf is p.fit else ("other", None), p)
                        if p.fit is None and pending:  # nothing to fit in this period: the next one starts
                            start(pending.pop(0))
                        bar.total = estimate_total()
                elif kind[0] == "fit":
                    if pending:
                        start(pending.pop(0))
                        bar.total = estimate_total()
                    g = p.group
                    try:
                        run.fits[(g.arm, g.period)] = f.result()
                    except Exception as exc:  # noqa: BLE001
                        _report(run, T.Failed(f"arm {g.arm}, period {g.period}", first_line(exc)), settings.strict, quiet)
                    # drop every reference to the period's futures: a future still held keeps its
                    # result in the worker's memory, and a worker holding every fit of the fleet
                    # makes each of its garbage collections (and so each later task) slower
                    p.data, p.fit = [], None
                    del f
    except BaseException:
        for rec in list(kinds.values()):
            rec[2].cancel()
        raise
    return run


def _second_stage(run: FleetRun, p: _Period, settings: FitSettings, submit, quiet: bool) -> list:
    """Plan a period whose logs are all conditioned and submit its choice, compression and fit."""
    good = []
    for k in range(len(p.jobs)):
        s = p.summaries[k]
        if "failed" in s:
            _report(run, s["failed"], settings.strict, quiet)
        else:
            good.append(k)
    g = p.group
    if not good:
        _report(run, T.Failed(f"arm {g.arm}, period {g.period}", "no log of this period could be used"), settings.strict, quiet)
        p.data = []
        return []
    sums = [p.summaries[k] for k in good]
    plan = T.plan_period(sums)
    new = []
    terms = settings.terms
    if isinstance(terms, str) and terms == "auto":
        if settings.split:
            parts = [submit(T.choice_parts_of, p.data[k], g.description, plan.stride) for k in good]
        else:
            parts = [None]
            for k in good:
                parts.append(submit(T.choice_parts_of, p.data[k], g.description, plan.stride, parts[-1]))
            parts = parts[1:]
        terms = submit(T.choose_period_terms, g.description, plan.total, plan.stride, *(parts if settings.split else parts[-1:]))
        new += parts + [terms]
    keep = settings.fit_options.get("uncertainty", "blocks") == "blocks"
    if settings.split:
        chunks = [submit(T.compress_stretch, p.data[k], g.description, terms, seg, a, b, ranges, plan.dt, keep)
                  for k, mine in zip(good, plan.stretches) for seg, a, b, ranges in mine]
        new += chunks
    sources = [src for s in sums for src in s["sources"]]
    warns = [w for s in sums for w in s["warnings"]]
    logs = [p.jobs[k].log for k in good]
    options = sums[0]["options"] | {"cutoff": sums[0]["cutoff"]}
    if settings.split:
        p.fit = submit(T.fit_period, g.description, terms, settings.method, settings.fit_options, plan.block, sources,
                       logs, warns, options, *chunks)
    else:
        work = [(k, *st) for k, mine in zip(good, plan.stretches) for st in mine]
        state = None
        for k, seg, a, b, ranges in work[:-1]:
            state = submit(T.continue_compression, p.data[k], g.description, terms, state, seg, a, b, ranges, plan.dt, plan.block, keep)
            new.append(state)
        k, seg, a, b, ranges = work[-1]
        p.fit = submit(T.fold_and_fit, p.data[k], g.description, terms, state, seg, a, b, ranges, plan.dt, plan.block, keep,
                       settings.method, settings.fit_options, sources, logs, warns, options)
    new.append(p.fit)
    p.data = []  # the cluster keeps the data sets while tasks need them, no longer
    return new


def run_serial(groups: list[Group], settings: FitSettings, quiet: bool = True) -> FleetRun:
    """The same work as :func:`run_fleet` in a plain loop in this process (no engine)."""
    run = FleetRun()
    for g in groups:
        jobs = _jobs(g, settings)
        data = [T.condition_log(jobs[0])]
        sums = [T.describe_log(data[0])]
        for job in jobs[1:]:
            data.append(T.condition_log(job, sums[0]))
            sums.append(T.describe_log(data[-1]))
        good = []
        for k, s in enumerate(sums):
            if "failed" in s:
                _report(run, s["failed"], settings.strict, quiet)
            else:
                good.append(k)
        if not good:
            _report(run, T.Failed(f"arm {g.arm}, period {g.period}", "no log of this period could be used"), settings.strict, quiet)
            continue
        gs = [sums[k] for k in good]
        plan = T.plan_period(gs)
        terms = settings.terms
        if isinstance(terms, str) and terms == "auto":
            parts = None
            for k in good:
                if settings.split:
                    mine = T.choice_parts_of(data[k], g.description, plan.stride)
                    parts = mine if parts is None else merge_parts(parts, mine)
                else:
                    parts = T.choice_parts_of(data[k], g.description, plan.stride, parts)
            terms = T.choose_period_terms(g.description, plan.total, plan.stride, parts)
        keep = settings.fit_options.get("uncertainty", "blocks") == "blocks"
        if settings.split:
            chunks = [T.compress_stretch(data[k], g.description, terms, seg, a, b, ranges, plan.dt, keep)
                      for k, mine in zip(good, plan.stretches) for seg, a, b, ranges in mine]
        else:
            state = None
            for k, mine in zip(good, plan.stretches):
                for seg, a, b, ranges in mine:
                    state = T.continue_compression(data[k], g.description, terms, state, seg, a, b, ranges, plan.dt, plan.block, keep)
            chunks = [state]
        try:
            run.fits[(g.arm, g.period)] = T.fit_period(
                g.description, terms, settings.method, settings.fit_options, plan.block, [x for s in gs for x in s["sources"]],
                [jobs[k].log for k in good], [w for s in gs for w in s["warnings"]], gs[0]["options"] | {"cutoff": gs[0]["cutoff"]}, *chunks)
        except Exception as exc:  # noqa: BLE001
            _report(run, T.Failed(f"arm {g.arm}, period {g.period}", first_line(exc)), settings.strict, quiet)
    return run
