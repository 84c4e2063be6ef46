"""Scale-out: forecasts as work units on Dask (many sites, launch times and members).

A forecast of one plan at one launch time splits into work units that are pure functions of picklable
inputs (docs/scale.md):

- :func:`fly_nominal_unit` ``(plan, winds, launch_time_s) -> NominalRun``: member 0 (mean wind, nominal
  parameters); it also fixes the wind-sample corridor of that forecast.
- :func:`fly_chunk` ``(plan, winds, nominal, members, n_total, seed) -> ChunkResult``: a chunk of members,
  with their perturbation factors from ``ensemble.member_generator(seed, i)`` and their wind realisations
  from ``gp_sample.member_wind_generator(seed, i)``. A member's numbers therefore depend only on
  (plan, winds, launch time, n_total, seed, i), never on the chunking or the worker; chunks are aligned to
  ``gp_sample.BATCH_MEMBERS`` so that even the batched linear algebra of the wind draws is the same.
- :func:`assemble_forecast`: the chunks and the nominal run → a :class:`ForecastResult` equal to
  :func:`balloonpath.forecast.run_forecast`'s (tested bit for bit in tests/test_scale.py).

An :class:`Engine` runs them: in this process (``workers=1``), on a local Dask cluster of ``workers``
processes (one thread each, loopback only), or on a running ``dask.distributed`` scheduler. The wind field
is scattered to every worker once (``broadcast=True``); tasks get retries, and a worker lost mid-run makes
the scheduler re-run its tasks elsewhere (so no member is lost) or, after repeated losses, the run fails
with one line (:class:`EngineError`).
"""

from __future__ import annotations

import dataclasses
import math
import os
import time
import uuid
from collections.abc import Callable, Iterator, Sequence
from dataclasses import dataclass
from typing import Any

import numpy as np

from balloonpath.ensemble import State, Trajectories, draw_member_factors, integrate
from balloonpath.errors import BalloonpathError, WarningLog, recording_warnings
from balloonpath.flight.vertical import VerticalParams, perturbed
from balloonpath.forecast import (
    TRACKS_FOR_PLOTS,
    LoadedWinds,
    NominalFirst,
    _assemble,
    draw_member_winds,
    fly_nominal,
    load_winds,
    set_corridor,
)
from balloonpath.plan import Plan
from balloonpath.result import ForecastResult
from balloonpath.terrain import terrain_from_plan
from balloonpath.winds.field import MeanMemberWinds, MemberWinds
from balloonpath.winds.gp_sample import BATCH_MEMBERS

#: Default members per work unit: large enough to amortise the integrator's per-step overhead, small
#: enough for several units per worker. Always a multiple of ``BATCH_MEMBERS``.
DEFAULT_CHUNK_MEMBERS = 128
#: Wind samplers (grid, Cholesky factors, gridded mean) kept per worker process, most recent first.
SAMPLER_CACHE_SIZE = 4


class EngineError(BalloonpathError):
    """The distributed engine could not finish a run (workers lost repeatedly, scheduler unreachable)."""


# ------------------------------------------------------------------------------------------ work units
@dataclass(frozen=True)
class NominalRun:
    """Member 0 of one forecast: its trajectory, the nominal parameters and the warnings it raised."""

    launch_time_s: float
    trajectories: Trajectories
    params: VerticalParams
    warnings: tuple[str, ...] = ()


@dataclass(frozen=True)
class ChunkResult:
    """Burst, landing and parameters of a chunk of members (arrays of shape (k,), member order).

    ``tracks`` holds the recorded paths (K, T) of the chunk's members 1..TRACKS_FOR_PLOTS (keys time_s,
    lat, lon, alt_m), ``track_members`` their numbers; ``steps`` the integrator steps of the chunk;
    ``member_steps`` the sum over members of flight time / time step (the work done, for throughput).
    """

    launch_time_s: float
    members: np.ndarray
    burst: dict[str, np.ndarray]
    landing: dict[str, np.ndarray]
    max_alt_m: np.ndarray
    track_members: np.ndarray
    tracks: dict[str, np.ndarray]
    steps: int
    member_steps: int
    elapsed_s: float
    worker: str
    warnings: tuple[str, ...] = ()


def _winds_of(handle: Any) -> tuple[LoadedWinds, tuple[str, ...]]:
    """A LoadedWinds, or the (LoadedWinds, warnings) pair returned by :func:`load_winds_unit`."""
    if isinstance(handle, tuple):
        return handle[0], tuple(handle[1])
    return handle, ()


def load_winds_unit(plan: Plan) -> tuple[LoadedWinds, tuple[str, ...]]:
    """Load a plan's winds (a task of its own in a batch) and the warnings raised doing so."""
    log = WarningLog()
    with recording_warnings(log):
        winds = load_winds(plan, log)
    return winds, tuple(log.messages)


def fly_nominal_unit(plan: Plan, winds: Any, launch_time_s: float) -> NominalRun:
    """Fly member 0 of the forecast at ``launch_time_s`` (see :func:`balloonpath.forecast.fly_nominal`)."""
    w, _ = _winds_of(winds)
    log = WarningLog()
    with recording_warnings(log):
        traj, params = fly_nominal(plan, w, float(launch_time_s))
    return NominalRun(float(launch_time_s), traj, params, tuple(log.messages))


def member_parameters(plan: Plan, params: VerticalParams, members: np.ndarray, seed: int,
                      atmosphere: Any) -> tuple[VerticalParams, np.ndarray]:
    """Flight parameters and launch delays of the given members (member 0: nominal, delay 0).

    Each member's factors come from its own stream (``ensemble.draw_member_factors``), and
    ``flight.vertical.perturbed`` is elementwise, so the values do not depend on the other members.
    """
    ens = plan.ensemble
    f = draw_member_factors(members, seed, ens.ascent_sigma_fraction, ens.burst_sigma_fraction,
                            ens.descent_sigma_fraction, ens.launch_delay_sigma_min * 60.0)
    mp = perturbed(params.repeat(members.size), f.ascent, f.burst, f.descent, atmosphere=atmosphere)
    return mp, f.launch_delay_s


class _ChunkWinds:
    """Row k of a chunk flies member ``ids[k]``'s realisation."""

    def __init__(self, inner: MemberWinds, ids: np.ndarray) -> None:
        self.inner = inner
        self.ids = np.asarray(ids, dtype=int)
        self.n_members = int(self.ids.size)

    def wind(self, members: np.ndarray, lat: np.ndarray, lon: np.ndarray, alt_m: np.ndarray,
             time_s: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
        return self.inner.wind(self.ids[np.asarray(members, dtype=int)], lat, lon, alt_m, time_s)


_SAMPLERS: list[tuple[Any, Any, int, Any]] = []  # (field, corridor, n_total, MemberSampler)


def _chunk_member_winds(plan: Plan, winds: LoadedWinds, nominal: NominalRun, ids: np.ndarray,
                        n_total: int, seed: int) -> MemberWinds:
    """Realisations of members ``ids``; the sampler is built once per (field, corridor, n) per process."""
    if not plan.ensemble.wind_uncertainty:
        return MeanMemberWinds(winds.field, n_total)
    field_c = set_corridor(winds.field, plan, nominal.trajectories)
    if not hasattr(field_c, "member_sampler"):
        return draw_member_winds(dataclasses.replace(winds, field=field_c), n_total, seed, member_ids=ids)
    return NominalFirst(field_c, cached_member_sampler(field_c, n_total, base=winds.field).draw(ids, seed))


def cached_member_sampler(field_c: Any, n_total: int, base: Any = None) -> Any:
    """``field_c.member_sampler(n_total)``, built once per (base field, corridor, n_total) per process.

    ``base`` is the object whose identity keys the cache (default ``field_c``): a forecast's scattered
    field, or a window sweep's scattered corridor field (:mod:`balloonpath.windows`).
    """
    base = field_c if base is None else base
    corridor = getattr(field_c, "corridor", None)
    for key, cor, n, cached in _SAMPLERS:
        if key is base and cor == corridor and n == n_total:
            return cached
    sampler = field_c.member_sampler(n_total)
    _SAMPLERS.insert(0, (base, corridor, n_total, sampler))
    del _SAMPLERS[SAMPLER_CACHE_SIZE:]
    return sampler


def fly_chunk(plan: Plan, winds: Any, nominal: NominalRun, members: np.ndarray, n_total: int,
              seed: int) -> ChunkResult:
    """Fly members ``members`` (all >= 1) of an ensemble of ``n_total`` launched at ``nominal``'s time.

    Pure function of its inputs: the same arguments give the same arrays on any worker.
    """
    t_begin = time.perf_counter()
    w, _ = _winds_of(winds)
    ids = np.asarray(members, dtype=int)
    if ids.size == 0 or ids.min() < 1 or ids.max() >= n_total:
        raise ValueError(f"fly_chunk: members must lie in 1..{n_total - 1}")
    log = WarningLog()
    ens = plan.ensemble
    t0 = nominal.launch_time_s
    with recording_warnings(log):
        params, delays = member_parameters(plan, nominal.params, ids, seed, w.atmosphere)
        member_winds = _chunk_member_winds(plan, w, nominal, ids, n_total, seed)
        state = State.at_launch(plan.launch.latitude, plan.launch.longitude, plan.launch.elevation_m,
                                t0 + delays, ids.size)
        record = np.flatnonzero(ids <= TRACKS_FOR_PLOTS)
        tr = integrate(state, params, _ChunkWinds(member_winds, ids), terrain_from_plan(plan), w.atmosphere,
                       dt_s=ens.time_step_s, record=record)
    flown = tr.landing_time_s - (t0 + delays)
    member_steps = int(np.sum(np.ceil(flown / ens.time_step_s)))
    return ChunkResult(
        launch_time_s=t0, members=ids,
        burst={"lat": tr.burst_lat, "lon": tr.burst_lon, "alt_m": tr.burst_alt_m, "time_s": tr.burst_time_s},
        landing={"lat": tr.landing_lat, "lon": tr.landing_lon, "alt_m": tr.landing_alt_m,
                 "time_s": tr.landing_time_s, "speed_m_s": tr.landing_speed_m_s},
        max_alt_m=tr.max_alt_m, track_members=ids[record],
        tracks={k: tr.tracks[k] for k in ("time_s", "lat", "lon", "alt_m", "phase")},
        steps=int(tr.steps), member_steps=member_steps, elapsed_s=time.perf_counter() - t_begin,
        worker=f"{os.uname().nodename}:{os.getpid()}", warnings=tuple(log.messages),
    )


def member_chunks(n_total: int, chunk_members: int = DEFAULT_CHUNK_MEMBERS) -> list[np.ndarray]:
    """Members 1..n_total-1 in chunks whose edges are multiples of ``chunk_members``.

    ``chunk_members`` is rounded up to a multiple of ``BATCH_MEMBERS`` so that no wind-draw batch is
    split between two chunks (each batch is then drawn exactly once).
    """
    size = max(BATCH_MEMBERS, int(math.ceil(int(chunk_members) / BATCH_MEMBERS)) * BATCH_MEMBERS)
    edges = list(range(0, int(n_total), size)) + [int(n_total)]
    chunks = [np.arange(max(a, 1), b) for a, b in zip(edges[:-1], edges[1:], strict=True)]
    return [c for c in chunks if c.size]


def assemble_forecast(plan: Plan, winds: Any, nominal: NominalRun, chunks: Sequence[ChunkResult],
                      n_total: int, seed: int) -> ForecastResult:
    """One :class:`ForecastResult` from the nominal run and the chunks (any order), as ``run_forecast``."""
    w, load_warnings = _winds_of(winds)
    log = WarningLog(list(load_warnings) + list(nominal.warnings))
    chunks = sorted(chunks, key=lambda c: int(c.members[0]))
    ids = np.concatenate([c.members for c in chunks]) if chunks else np.zeros(0, int)
    if not np.array_equal(ids, np.arange(1, n_total)):
        raise EngineError(f"engine: a forecast came back with {ids.size} of {n_total - 1} members; "
                          "fix: re-run (a work unit was lost) and report the problem if it persists")
    for c in chunks:
        for m in c.warnings:
            if m not in log.messages:
                log.messages.append(m)
    t0 = nominal.launch_time_s
    if n_total > 1:
        all_ids = np.arange(n_total)
        member_params, delays = member_parameters(plan, nominal.params, all_ids, seed, w.atmosphere)
        others = _stack(chunks)
    else:
        member_params, delays, others = nominal.params, np.zeros(1), None
    with recording_warnings(log):
        result = _assemble(plan, nominal.trajectories, others, member_params, delays, w, seed, t0)
    return dataclasses.replace(result, warnings=tuple(log.messages))


def _stack(chunks: Sequence[ChunkResult]) -> Trajectories:
    """Concatenate chunks (sorted) into the Trajectories of members 1..n-1 (tracks NaN-padded)."""
    cat = {g: {k: np.concatenate([getattr(c, g)[k] for c in chunks]) for k in getattr(chunks[0], g)}
           for g in ("burst", "landing")}
    width = max(c.steps for c in chunks) + 1
    tracks: dict[str, np.ndarray] = {}
    for k in ("time_s", "lat", "lon", "alt_m", "phase"):
        parts = []
        for c in chunks:
            a = c.tracks[k]
            pad = np.full((a.shape[0], width - a.shape[1]), np.nan)
            parts.append(np.concatenate([a, pad], axis=1))
        tracks[k] = np.concatenate(parts, axis=0)
    return Trajectories(
        burst_lat=cat["burst"]["lat"], burst_lon=cat["burst"]["lon"], burst_alt_m=cat["burst"]["alt_m"],
        burst_time_s=cat["burst"]["time_s"], landing_lat=cat["landing"]["lat"],
        landing_lon=cat["landing"]["lon"], landing_alt_m=cat["landing"]["alt_m"],
        landing_time_s=cat["landing"]["time_s"], landing_speed_m_s=cat["landing"]["speed_m_s"],
        max_alt_m=np.concatenate([c.max_alt_m for c in chunks]),
        track_members=np.concatenate([c.track_members for c in chunks]), tracks=tracks,
        steps=width - 1,
    )


def finish_unit(finish: Callable[..., Any], plan: Plan, winds: Any, nominal: NominalRun, n_total: int,
                seed: int, *chunks: ChunkResult, **kwargs: Any) -> Any:
    """Assemble a forecast on a worker and hand it to ``finish(result, plan, chunks, **kwargs)``."""
    result = assemble_forecast(plan, winds, nominal, chunks, n_total, seed)
    return finish(result, plan, chunks, **kwargs)


# ------------------------------------------------------------------------------------------ the engine
class _InlineFuture:
    """A lazily evaluated call in this process (the ``workers=1`` engine)."""

    def __init__(self, fn: Callable[..., Any], args: tuple[Any, ...], kwargs: dict[str, Any]) -> None:
        self.fn, self.args, self.kwargs = fn, args, kwargs
        self.status = "pending"
        self._value: Any = None
        self._error: BaseException | None = None

    def result(self) -> Any:
        if self.status == "pending":
            try:
                args = [a.result() if isinstance(a, _InlineFuture) else a for a in self.args]
                self._value = self.fn(*args, **self.kwargs)
                self.status = "finished"
            except Exception as exc:  # re-raised to the caller below
                self._error, self.status = exc, "error"
            self.fn = self.args = self.kwargs = None  # free the inputs
        if self._error is not None:
            raise self._error
        return self._value


class Engine:
    """Where work units run: this process, a local Dask cluster, or a running Dask scheduler.

    Parameters
    ----------
    workers : int, optional
        Local worker processes (one thread each, on 127.0.0.1). 1: run in this process without Dask;
        0 or None: all cores (``os.cpu_count()``). Ignored with ``scheduler``.
    scheduler : str, optional
        Address of a running ``dask.distributed`` scheduler (e.g. ``tcp://10.0.0.5:8786``).
    retries : int
        Times a task that raised is retried (a worker that dies is handled by the scheduler: its tasks
        are re-run elsewhere, up to ``distributed.scheduler.allowed-failures`` losses per task).
    chunk_members : int, optional
        Members per work unit (default: 128, or fewer so that a single forecast gives each worker at least
        two units; rounded up to a multiple of 32).

    Use as a context manager; clusters it started are closed on exit.
    """

    def __init__(self, workers: int | None = 1, scheduler: str | None = None, retries: int = 2,
                 chunk_members: int | None = None, connect_timeout_s: float = 20.0) -> None:
        if workers is not None and workers < 0:
            raise BalloonpathError(f"--workers: must be >= 0, got {workers}; fix: give a number of processes")
        self.scheduler = scheduler
        self.workers = int(workers) if workers else (os.cpu_count() or 1)
        self.retries = int(retries)
        self.chunk_members = chunk_members
        self.connect_timeout_s = float(connect_timeout_s)
        self.client: Any = None
        self.cluster: Any = None
        self._token = uuid.uuid4().hex[:8]
        self._count = 0

    # -- lifecycle
    @property
    def inline(self) -> bool:
        """True when work units run in this process."""
        return self.scheduler is None and self.workers == 1

    def __enter__(self) -> Engine:
        if self.inline:
            return self
        from distributed import Client

        try:
            if self.scheduler is not None:
                self.client = Client(self.scheduler, timeout=f"{self.connect_timeout_s}s")
            else:
                import dask
                from distributed import LocalCluster

                # Dask's default MALLOC_TRIM_THRESHOLD_=65536 turns every large numpy temporary of the
                # integrator into an mmap/munmap pair: units of thousands of rows ran 1.7x slower
                # (benchmarks/scale.py). The workers keep glibc's default here.
                with dask.config.set({"distributed.nanny.pre-spawn-environ.MALLOC_TRIM_THRESHOLD_": None}):
                    self.cluster = LocalCluster(n_workers=self.workers, threads_per_worker=1, processes=True,
                                                host="127.0.0.1", dashboard_address=None,
                                                scheduler_kwargs={"dashboard": False})
                self.client = Client(self.cluster)
        except (OSError, TimeoutError) as exc:
            self.close()
            where = self.scheduler or "a local cluster"
            raise EngineError(f"--scheduler: cannot connect to {where} ({type(exc).__name__}); fix: start "
                              "the scheduler (`dask scheduler`) and give its address, e.g. tcp://host:8786"
                              ) from None
        return self

    def __exit__(self, *exc: object) -> None:
        self.close()

    def close(self) -> None:
        """Close the client, and the cluster if this engine started it."""
        if self.client is not None:
            self.client.close()
            self.client = None
        if self.cluster is not None:
            self.cluster.close()
            self.cluster = None

    @property
    def n_workers(self) -> int:
        """Worker processes (1 inline)."""
        if self.client is None:
            return 1
        return max(len(self.client.scheduler_info().get("workers", {})), 1)

    def describe(self) -> str:
        """One line for the console and batch.json."""
        if self.inline:
            return "this process (1 worker)"
        if self.scheduler is not None:
            return f"dask scheduler {self.scheduler} ({self.n_workers} workers)"
        return f"local dask cluster ({self.n_workers} worker processes, 1 thread each)"

    # -- tasks
    def _key(self, name: str) -> str:
        self._count += 1
        return f"{name}-{self._token}-{self._count}"

    def scatter(self, obj: Any) -> Any:
        """Ship ``obj`` to every worker once; returns the handle tasks take as an argument."""
        if self.client is None:
            return obj
        return self.client.scatter(obj, broadcast=True, hash=False)

    def submit(self, fn: Callable[..., Any], *args: Any, name: str = "unit", **kwargs: Any) -> Any:
        """Run ``fn(*args, **kwargs)`` as a task (futures among the args are resolved first)."""
        if self.client is None:
            return _InlineFuture(fn, args, kwargs)
        return self.client.submit(fn, *args, key=self._key(name), retries=self.retries, pure=False,
                                  **kwargs)

    def as_completed(self, futures: Sequence[Any]) -> Iterator[Any]:
        """Futures in the order they finish (submission order inline)."""
        if self.client is None:
            for f in futures:
                try:
                    f.result()
                except Exception:  # the caller calls .result() again and sees the error
                    pass
                yield f
            return
        from distributed import as_completed

        yield from as_completed(list(futures))

    def result(self, future: Any) -> Any:
        """The value of a finished future; lost workers and connection failures become EngineError."""
        try:
            return future.result()
        except BalloonpathError:
            raise
        except Exception as exc:
            name = type(exc).__name__
            if name in ("KilledWorker", "CancelledError", "CommClosedError", "TimeoutError") or isinstance(
                exc, OSError
            ):
                raise EngineError(
                    f"engine: work unit {getattr(future, 'key', '?')} failed ({name}: {exc}); fix: check the "
                    "workers' memory and logs, then re-run (results do not depend on the workers)"
                ) from None
            raise

    def chunk_size(self, n_total: int, n_forecasts: int) -> int:
        """Members per unit: the engine's setting, or enough units to keep every worker busy."""
        if self.chunk_members is not None:
            return int(self.chunk_members)
        units_wanted = 2 * self.n_workers
        per_forecast = max(1, math.ceil(units_wanted / max(n_forecasts, 1)))
        return int(min(DEFAULT_CHUNK_MEMBERS, max(BATCH_MEMBERS, math.ceil((n_total - 1) / per_forecast))))


# ------------------------------------------------------------------------------------------ orchestration
@dataclass(frozen=True)
class Job:
    """One forecast: a plan (index into the plans), a launch time, members and seed."""

    plan_index: int
    launch_time_s: float
    members: int
    seed: int


def run_jobs(engine: Engine, plans: Sequence[Plan], winds: Sequence[Any], jobs: Sequence[Job],
             progress: Callable[[int, int], None] | None = None,
             finish: Callable[..., Any] | None = None, finish_kwargs: Callable[[Job], dict] | None = None,
             on_done: Callable[[int, Any], None] | None = None) -> list[Any]:
    """Run forecasts as work units and return, per job, its ForecastResult (or ``finish``'s value).

    Parameters
    ----------
    engine : Engine
        An entered engine.
    plans : sequence of Plan
    winds : sequence
        Per plan: a scattered LoadedWinds, or the future of :func:`load_winds_unit`.
    jobs : sequence of Job
    progress : callable, optional
        ``progress(members_done, members_total)`` as work units finish (on the client).
    finish : callable, optional
        ``finish(result, plan, chunks, **finish_kwargs(job))`` run as a task after a job's chunks (e.g.
        zones and files on the workers); its return value replaces the ForecastResult.
    on_done : callable, optional
        ``on_done(job_index, value)`` as each job completes (e.g. write a row).
    """
    total = sum(max(j.members - 1, 0) for j in jobs) or 1
    done = 0
    pending: dict[Any, tuple[str, int, int]] = {}
    per_job: list[dict[str, Any]] = []
    for k, job in enumerate(jobs):
        plan, w = plans[job.plan_index], winds[job.plan_index]
        nominal = engine.submit(fly_nominal_unit, plan, w, job.launch_time_s, name="nominal")
        size = engine.chunk_size(job.members, len(jobs))
        chunks = [engine.submit(fly_chunk, plan, w, nominal, ids, job.members, job.seed, name="chunk")
                  for ids in member_chunks(job.members, size)]
        entry: dict[str, Any] = {"nominal": nominal, "chunks": chunks, "final": None}
        if finish is not None:
            kw = finish_kwargs(job) if finish_kwargs is not None else {}
            entry["final"] = engine.submit(finish_unit, finish, plan, w, nominal, job.members, job.seed,
                                           *chunks, name="finish", **kw)
            pending[entry["final"]] = ("final", k, 0)
        elif not chunks:
            pending[nominal] = ("nominal", k, 0)
        for c, ids in zip(chunks, member_chunks(job.members, size), strict=True):
            pending[c] = ("chunk", k, ids.size)
        per_job.append(entry)
    out: list[Any] = [None] * len(jobs)
    remaining = [len(e["chunks"]) + (1 if e["final"] is not None else 0) for e in per_job]
    remaining = [r if r else 1 for r in remaining]
    try:
        for fut in engine.as_completed(list(pending)):
            kind, k, count = pending.pop(fut)
            if kind == "chunk" and finish is not None:
                if fut.status == "error":
                    engine.result(fut)
            else:
                engine.result(fut)
            done += count
            if progress is not None and count:
                progress(done, total)
            remaining[k] -= 1
            if remaining[k] == 0:
                out[k] = _job_value(engine, plans, winds, jobs[k], per_job[k], finish is not None)
                per_job[k] = {}
                if on_done is not None:
                    on_done(k, out[k])
    except BaseException:
        if engine.client is not None:
            engine.client.cancel([f for f in pending if hasattr(f, "cancel")])
        raise
    return out


def _job_value(engine: Engine, plans: Sequence[Plan], winds: Sequence[Any], job: Job, entry: dict[str, Any],
               finished: bool) -> Any:
    if finished:
        return engine.result(entry["final"])
    nominal = engine.result(entry["nominal"])
    chunks = [engine.result(c) for c in entry["chunks"]]
    w = winds[job.plan_index]
    if not isinstance(w, LoadedWinds | tuple):
        w = engine.result(w)
    return assemble_forecast(plans[job.plan_index], w, nominal, chunks, job.members, job.seed)


def run_forecast_engine(plan: Plan, engine: Engine, members: int | None = None, seed: int | None = None,
                        winds: LoadedWinds | None = None, launch_time_s: float | None = None,
                        progress: Callable[[int, int], None] | None = None) -> ForecastResult:
    """:func:`balloonpath.forecast.run_forecast` on an engine: same arguments, same result.

    The winds are loaded here (or given), scattered once to every worker, and the members flown in
    chunks; the result is assembled in this process.
    """
    n = int(members if members is not None else plan.ensemble.members)
    s = int(seed if seed is not None else plan.ensemble.seed)
    if n < 1:
        raise BalloonpathError(f"--members: must be >= 1, got {n}; fix: ask for at least one member")
    load_warnings: tuple[str, ...] = ()
    if winds is None:
        winds, load_warnings = load_winds_unit(plan)
    t0 = plan.launch_time_s if launch_time_s is None else float(launch_time_s)
    handle = engine.scatter(winds)
    result = run_jobs(engine, [plan], [handle], [Job(0, t0, n, s)], progress=progress)[0]
    if load_warnings:
        merged = list(load_warnings) + [m for m in result.warnings if m not in load_warnings]
        result = dataclasses.replace(result, warnings=tuple(merged))
    return result


def throughput(chunks: Sequence[ChunkResult]) -> dict[str, float]:
    """Member-steps, busy seconds and member-steps per busy second of some chunks (cost model)."""
    steps = float(sum(c.member_steps for c in chunks))
    busy = float(sum(c.elapsed_s for c in chunks))
    return {"member_steps": steps, "busy_s": busy, "member_steps_per_s": steps / busy if busy > 0 else math.nan}


# ------------------------------------------------------------------------------------------ batch
BATCH_COLUMNS: tuple[str, ...] = (
    "plan", "site", "launch_time", "members", "seed", "landing_latitude", "landing_longitude", "landing_time",
    "distance_km", "bearing_deg", "mean_latitude", "mean_longitude", "ellipse90_semi_major_km",
    "ellipse90_semi_minor_km", "region90_area_km2", "p_water", "p_avoid_max", "flight_time_min",
    "max_altitude_m", "warnings", "member_steps", "busy_s", "folder",
)


def batch_row(result: ForecastResult, plan: Plan, chunks: Sequence[ChunkResult],
              out_dir: str | None = None) -> dict[str, Any]:
    """Zones and the summary of one forecast as a ``batch.csv`` row (a task on a worker).

    With ``out_dir`` the usual forecast folder is written there too (the workers must see that path:
    a shared filesystem for remote workers).
    """
    from balloonpath import zones as zones_mod
    from balloonpath.forecast import summary_dict, write_outputs

    if out_dir is not None:
        s = write_outputs(result, plan, out_dir, report=False).summary
    else:
        log = WarningLog(list(result.warnings))
        with recording_warnings(log):
            zones = zones_mod.compute_zones(result, avoid_path=plan.zones.avoid, water=plan.zones.water)
        s = summary_dict(dataclasses.replace(result, warnings=tuple(log.messages)), zones)
    ens, land, probs = s["ensemble"], s["landing"], s["probabilities"]
    e90 = next((e for e in ens.get("ellipses", []) if abs(e["probability"] - 0.9) < 1e-9), None)
    avoid = [p for p in (probs.get("avoid") or {}).values() if p is not None]
    cost = throughput(chunks)

    def km(x: float | None) -> float | None:
        return None if x is None else round(x / 1000.0, 3)

    return {
        "plan": s["plan"], "site": plan.launch.site_name or "", "launch_time": s["launch"]["time"],
        "members": ens["members"], "seed": ens["seed"], "landing_latitude": land["latitude"],
        "landing_longitude": land["longitude"], "landing_time": land["time"],
        "distance_km": km(land["distance_m"]), "bearing_deg": land["bearing_deg"],
        "mean_latitude": ens["landing_mean"]["latitude"], "mean_longitude": ens["landing_mean"]["longitude"],
        "ellipse90_semi_major_km": km(e90["semi_major_m"]) if e90 else None,
        "ellipse90_semi_minor_km": km(e90["semi_minor_m"]) if e90 else None,
        "region90_area_km2": ens.get("region_90_area_km2"), "p_water": probs.get("water"),
        "p_avoid_max": max(avoid) if avoid else None,
        "flight_time_min": None if s["flight_time_s"] is None else round(s["flight_time_s"] / 60.0, 2),
        "max_altitude_m": s["max_altitude_m"], "warnings": len(s["warnings"]),
        "member_steps": int(cost["member_steps"]), "busy_s": round(cost["busy_s"], 3),
        "folder": "" if out_dir is None else str(out_dir),
    }


@dataclass(frozen=True)
class BatchRun:
    """What a batch produced: rows in (plan, launch time) order and the run's figures."""

    rows: tuple[dict[str, Any], ...]
    engine: str
    workers: int
    elapsed_s: float
    member_steps: int
    busy_s: float
    files: tuple[str, ...]


def _csv_cell(v: Any) -> str:
    if v is None:
        return ""
    text = str(v)
    return '"' + text.replace('"', '""') + '"' if any(c in text for c in ',"\n') else text


def batch_csv_text(rows: Sequence[dict[str, Any]]) -> str:
    """``batch.csv``: header :data:`BATCH_COLUMNS`, one row per plan and launch time (empty = no value)."""
    lines = [",".join(BATCH_COLUMNS)]
    lines += [",".join(_csv_cell(r.get(c)) for c in BATCH_COLUMNS) for r in rows]
    return "\n".join(lines) + "\n"


def run_batch(plans: Sequence[Plan], times: Sequence[Sequence[float]], out_dir: str | os.PathLike,
              engine: Engine, members: int | None = None, seed: int | None = None, folders: bool = False,
              progress: Callable[[int, int], None] | None = None) -> BatchRun:
    """Forecast every plan at each of its launch times on ``engine`` and write ``batch.csv``.

    Parameters
    ----------
    plans : sequence of Plan
    times : sequence of sequences of float
        Launch times (POSIX s) per plan.
    out_dir : path
        Receives ``batch.csv``, ``batch.json`` and, with ``folders``, ``<plan stem>/<YYYYmmddTHHMMZ>/``.
    engine : Engine
        An entered engine. Each plan's winds are loaded by a task on a worker; the units of all
        forecasts share the workers.
    members, seed : int, optional
        Override every plan's ``[ensemble] members`` and ``seed``.
    """
    import json
    from pathlib import Path

    from balloonpath.fileio import atomic_write_text
    from balloonpath.timeutil import iso_from_posix

    t_begin = time.perf_counter()
    out = Path(out_dir)
    out.mkdir(parents=True, exist_ok=True)
    winds = [engine.submit(load_winds_unit, p, name="winds") for p in plans]
    jobs = [Job(i, float(t), int(members if members is not None else p.ensemble.members),
                int(seed if seed is not None else p.ensemble.seed))
            for i, p in enumerate(plans) for t in times[i]]

    def folder_of(job: Job) -> dict[str, Any]:
        if not folders:
            return {}
        stamp = iso_from_posix(job.launch_time_s).replace("-", "").replace(":", "")[:13] + "Z"
        return {"out_dir": str((out / Path(plans[job.plan_index].path).stem / stamp).resolve())}

    rows = run_jobs(engine, plans, winds, jobs, progress=progress, finish=batch_row, finish_kwargs=folder_of)
    elapsed = time.perf_counter() - t_begin
    steps = int(sum(r["member_steps"] for r in rows))
    busy = float(sum(r["busy_s"] for r in rows))
    csv_path = atomic_write_text(out / "batch.csv", batch_csv_text(rows))
    meta = {"engine": engine.describe(), "workers": engine.n_workers, "forecasts": len(rows),
            "elapsed_s": round(elapsed, 3), "member_steps": steps, "busy_s": round(busy, 3),
            "member_steps_per_busy_s": round(steps / busy, 1) if busy > 0 else None,
            "plans": [Path(p.path).name for p in plans]}
    json_path = atomic_write_text(out / "batch.json", json.dumps(meta, indent=2) + "\n")
    return BatchRun(tuple(rows), engine.describe(), engine.n_workers, elapsed, steps, busy,
                    (str(csv_path), str(json_path)))
