"""Tests of the scale-out engine (balloonpath.scale), per-member wind streams and the tiled GP fit.

References:
- numpy's SeedSequence documentation: ``SeedSequence(s).spawn(k)[i]`` has ``spawn_key == (i,)``, and a
  child of a child appends its index, so ``SeedSequence(s, spawn_key=(m,)).spawn(2)[1]`` is
  ``SeedSequence(s, spawn_key=(m, 1))`` (the member wind stream).
- The exact GP ([RW2006] Alg. 2.1, ``gp.Posterior``, itself checked against scikit-learn in test_gp.py) is
  the reference of the tiled fit.
- The engines are checked against ``forecast.run_forecast`` in this process: same plan and seed, the same
  bits. Dask clusters listen on 127.0.0.1 only.
"""

from __future__ import annotations

import os
import signal
import threading
import warnings
from pathlib import Path

import numpy as np
import pytest

from balloonpath.cli import main
from balloonpath.forecast import load_winds, run_forecast
from balloonpath.plan import load_plan
from balloonpath.scale import Engine, EngineError, member_chunks, run_forecast_engine
from balloonpath.winds.field import UniformField
from balloonpath.winds.gp import BackgroundErrorField, fit_wind_field
from balloonpath.winds.gp_kernels import GPHyperparameters
from balloonpath.winds.gp_sample import member_wind_generator
from balloonpath.winds.gp_tiles import accuracy_against_exact, fit_tiled
from balloonpath.winds.observations import WindObservations

COASTAL = Path(__file__).resolve().parents[1] / "scenarios" / "coastal" / "plan.toml"
T0 = 1_800_000_000.0
LAT0, LON0 = 52.4, -1.9  # invented site "Hollin Moor"


@pytest.fixture(scope="module")
def coastal():
    plan = load_plan(COASTAL)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        winds = load_winds(plan)
    return plan, winds


@pytest.fixture(scope="module")
def cluster():
    from distributed import Client, LocalCluster

    c = LocalCluster(n_workers=2, threads_per_worker=1, processes=True, host="127.0.0.1",
                     dashboard_address=None, scheduler_kwargs={"dashboard": False})
    client = Client(c)
    yield c, client
    client.close()
    c.close()


def _same(a, b) -> None:
    for group in ("landing", "burst"):
        for k in ("lat", "lon", "alt_m", "time_s"):
            np.testing.assert_array_equal(getattr(getattr(a, group), k), getattr(getattr(b, group), k))
    for k in a.member_params:
        np.testing.assert_array_equal(a.member_params[k], b.member_params[k])
    for k in a.member_tracks:
        np.testing.assert_array_equal(a.member_tracks[k], b.member_tracks[k])
    np.testing.assert_array_equal(a.nominal.lat, b.nominal.lat)


# ---------------------------------------------------------------------------------- wind streams
def test_member_wind_stream_is_child_one_of_the_member_sequence():
    # numpy SeedSequence docs: spawn appends the child index to the spawn key.
    want = np.random.default_rng(np.random.SeedSequence(11, spawn_key=(7,)).spawn(2)[1]).standard_normal(5)
    assert np.array_equal(member_wind_generator(11, 7).standard_normal(5), want)


@pytest.mark.parametrize("max_exact", [5000, 30])  # exact GP, and the DTC (inducing-point) path
def test_wind_realisations_do_not_depend_on_chunks(max_exact):
    rng = np.random.default_rng(3)
    n = 60
    obs = WindObservations(T0 + rng.uniform(-2, 2, n) * 3600, LAT0 + rng.uniform(-0.5, 0.5, n),
                           LON0 + rng.uniform(-0.8, 0.8, n), rng.uniform(6000, 9000, n), rng.normal(0, 3, n),
                           rng.normal(0, 3, n), np.ones(n), np.array(["t"] * n, dtype=object))
    field = fit_wind_field(obs, UniformField(0, 0), optimize=False, max_exact=max_exact, n_inducing=20,
                           hyperparameters=GPHyperparameters(80.0, 1.5, 4.0, 3.0), center=(LAT0, LON0, T0))
    field = field.with_corridor(LAT0 - 0.4, LAT0 + 0.4, LON0 - 0.6, LON0 + 0.6, 10_000.0,
                                T0 - 2 * 3600, T0 + 2 * 3600, alt_min_m=5000.0)
    whole = field.sample_members(np.arange(100), seed=5, n_total=100)
    parts = [field.sample_members(np.arange(a, min(a + 40, 100)), seed=5, n_total=100) for a in (0, 40, 80)]
    chunked = np.concatenate([p.deviations for p in parts])
    assert chunked.tobytes() == whole.deviations.tobytes()  # bit-identical (the documented choice)
    odd = field.sample_members(np.array([97, 3, 64]), seed=5, n_total=100)
    assert odd.deviations.tobytes() == whole.deviations[[97, 3, 64]].tobytes()
    # members evaluated through the chunk's own numbering give the same winds
    pts = (np.full(3, LAT0 + 0.1), np.full(3, LON0), np.full(3, 8000.0), np.full(3, T0))
    np.testing.assert_array_equal(odd.wind(np.array([97, 3, 64]), *pts)[0],
                                  whole.wind(np.array([97, 3, 64]), *pts)[0])
    # another seed gives other realisations; members differ from each other
    other = field.sample_members(np.arange(3), seed=6, n_total=100)
    assert not np.allclose(other.deviations, whole.deviations[:3])
    assert not np.allclose(whole.deviations[1], whole.deviations[2])
    with pytest.raises(ValueError, match="not in this chunk"):
        odd.wind(np.array([4]), *(a[:1] for a in pts))


def test_per_member_streams_keep_the_prior_spread():
    # Without observations the realisations have the prior sd everywhere (the GP's definition):
    # sd of a sample sd from 1000 draws is sigma / sqrt(2000) = 2.2 %; allow 7 % (3.1 sd).
    field = BackgroundErrorField(UniformField(4.0, 0.0), 3.0, center=(LAT0, LON0, T0),
                                 corridor_radius_km=80.0, alt_max_m=9_000.0,
                                 time_min_s=T0 - 3600, time_max_s=T0 + 3600)
    n = 1000
    m = field.sample_members(np.arange(n), seed=1)
    u, v = m.wind(np.arange(n), np.full(n, LAT0 + 0.3), np.full(n, LON0 - 0.2), np.full(n, 7000.0),
                  np.full(n, T0 + 1800.0))
    from balloonpath.winds.gp_kernels import altitude_profile

    sd = 3.0 * float(altitude_profile(7.0))  # prior sd s g(z) (kernel's altitude profile, docs/winds-gp.md)
    assert np.std(u) == pytest.approx(sd, rel=0.07)
    assert np.std(v) == pytest.approx(sd, rel=0.07)
    assert abs(np.corrcoef(u, v)[0, 1]) < 0.13  # u and v independent: 4 sd of 1/sqrt(1000)


def test_member_chunks_are_aligned_and_cover_the_members():
    chunks = member_chunks(200, 50)  # rounded up to 64
    assert [int(c[0]) for c in chunks] == [1, 64, 128, 192]
    assert np.array_equal(np.concatenate(chunks), np.arange(1, 200))


# ---------------------------------------------------------------------------------- engines
def test_same_result_on_one_worker_two_workers_and_a_cluster(coastal, cluster):
    plan, winds = coastal
    ref = run_forecast(plan, members=40, seed=3, winds=winds)
    with Engine(workers=1) as engine:
        one = run_forecast_engine(plan, engine, members=40, seed=3, winds=winds)
    _same(ref, one)
    with Engine(workers=2) as engine:
        assert engine.n_workers == 2
        two = run_forecast_engine(plan, engine, members=40, seed=3, winds=winds)
    _same(ref, two)
    c, _client = cluster
    seen = []
    with Engine(scheduler=c.scheduler_address, chunk_members=32) as engine:
        remote = run_forecast_engine(plan, engine, members=40, seed=3, winds=winds,
                                     progress=lambda done, total: seen.append((done, total)))
    _same(ref, remote)
    assert seen[-1] == (39, 39) and len(seen) == 2  # progress follows the two remote units


def test_a_worker_killed_mid_run_loses_no_member(coastal, cluster):
    plan, winds = coastal
    c, client = cluster
    ref = run_forecast(plan, members=128, seed=4, winds=winds)
    pids = client.run(os.getpid)
    victim = next(iter(pids.values()))
    killed = threading.Event()

    def kill_once(done: int, total: int) -> None:
        if not killed.is_set():
            killed.set()
            os.kill(victim, signal.SIGKILL)

    with Engine(scheduler=c.scheduler_address, chunk_members=32) as engine:
        out = run_forecast_engine(plan, engine, members=128, seed=4, winds=winds, progress=kill_once)
    assert killed.is_set()
    assert out.n_members == 128
    _same(ref, out)
    client.wait_for_workers(2, timeout=240)  # a restarted worker re-imports numpy, dask, balloonpath


def test_repeated_worker_loss_fails_with_one_line(cluster):
    c, client = cluster
    saved = c.scheduler.allowed_failures
    c.scheduler.allowed_failures = 0
    try:
        with Engine(scheduler=c.scheduler_address) as engine:
            fut = engine.submit(os._exit, 1, name="suicide")
            with pytest.raises(EngineError, match=r"failed \(KilledWorker.*fix: check the workers"):
                engine.result(fut)
    finally:
        c.scheduler.allowed_failures = saved
    client.wait_for_workers(2, timeout=240)  # a restarted worker re-imports numpy, dask, balloonpath


def test_unreachable_scheduler_is_a_one_line_error():
    with pytest.raises(EngineError, match=r"--scheduler: cannot connect to tcp://127.0.0.1:9.*fix: start"):
        with Engine(scheduler="tcp://127.0.0.1:9", connect_timeout_s=1.0):
            pass


def test_batch_command_writes_one_row_per_plan_and_time(tmp_path, coastal, capsys):
    plan, winds = coastal
    plans = tmp_path / "plans"
    plans.mkdir()
    text = COASTAL.read_text()
    for name in ("sounding.csv", "avoid.geojson"):
        text = text.replace(f'"{name}"', f'"{(COASTAL.parent / name).as_posix()}"')
    (plans / "alpha.toml").write_text(text)
    (plans / "beta.toml").write_text(text.replace("latitude = 40.15", "latitude = 40.05"))
    code = main(["batch", str(plans), "--start", "2027-09-03T12:00:00Z", "--end", "2027-09-03T13:00:00Z",
                 "--every", "1h", "--members", "8", "--workers", "1", "--out", str(tmp_path / "out")])
    assert code == 0
    lines = (tmp_path / "out" / "batch.csv").read_text().splitlines()
    assert len(lines) == 1 + 4 and lines[0].startswith("plan,site,launch_time")
    rows = [ln.split(",") for ln in lines[1:]]
    assert [r[0] for r in rows] == ["alpha.toml", "alpha.toml", "beta.toml", "beta.toml"]
    ref = run_forecast(load_plan(plans / "alpha.toml"), members=8, launch_time_s=plan.launch_time_s - 7200,
                       winds=winds)
    assert float(rows[0][5]) == round(float(ref.landing.lat[0]), 6)
    code = main(["batch", str(plans), "--end", "2027-09-03T13:00:00Z", "--out", str(tmp_path / "x")])
    assert code == 2 and "--end: given without --start" in capsys.readouterr().err


# ---------------------------------------------------------------------------------- tiled GP
def test_tiled_fit_matches_the_exact_gp_on_a_subset(cluster):
    rng = np.random.default_rng(5)
    hp = GPHyperparameters(50.0, 1.0, 6.0, 3.0)
    n = 900
    x = np.column_stack([rng.uniform(0, 600, n), rng.uniform(0, 600, n), rng.uniform(8, 11, n),
                         rng.uniform(-2, 2, n)])
    d = 1500  # truth: a random-Fourier-feature draw of the same kernel [Rahimi2007]
    w = rng.normal(size=(d, 4)) / np.array([50.0, 50.0, 1.0, 6.0])
    b = rng.uniform(0, 2 * np.pi, d)
    r = 3.0 * np.sqrt(2.0 / d) * np.cos(x @ w.T + b) @ rng.normal(size=(d, 2)) + rng.normal(0, 1, (n, 2))
    xs = np.column_stack([rng.uniform(0, 600, 400), rng.uniform(0, 600, 400), rng.uniform(8, 11, 400),
                          rng.uniform(-2, 2, 400)])
    c, _client = cluster
    with Engine(scheduler=c.scheduler_address) as engine:
        tiled = fit_tiled(x, r, np.ones(n), hp, tile_km=200.0, engine=engine)
    assert len(tiled.tiles) == 9
    assert max(p.points.shape[0] for p in tiled.posteriors) < 0.8 * n  # the tiles are local
    acc = accuracy_against_exact(x, r, np.ones(n), hp, xs, tiled)
    # loss against the exact GP: mean within 5 % of the posterior sd, sd within 2 % (measured 1 % / 0.1 %)
    assert acc["rms_diff_over_sd"] < 0.05
    assert acc["rms_sd_ratio_minus_1"] < 0.02
    # no halo, no margin: the blend is no longer smooth and the loss grows (the test can fail)
    rough = fit_tiled(x, r, np.ones(n), hp, tile_km=200.0, halo_km=1e-3, margin_km=0.0)
    assert accuracy_against_exact(x, r, np.ones(n), hp, xs, rough)["rms_diff_over_sd"] > acc["rms_diff_over_sd"]
