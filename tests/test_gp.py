"""Tests of the Gaussian-process wind field (balloonpath.winds.gp, gp_kernels, gp_sample).

References checked against:
- scikit-learn's GaussianProcessRegressor (reference implementation of [RW2006] Algorithm 2.1).
- REFERENCES.md §11: the worked numbers of [RW2006] Algorithm 2.1 (X = 0..4, y = sin X).
Statistical checks are seeded; their tolerances are stated beside each check.
"""

from __future__ import annotations

import warnings

import numpy as np
import pytest
from scipy.linalg import cho_solve

from balloonpath.errors import DataQualityWarning, FitWarning, InputDataError
from balloonpath.geodesy import LocalProjection
from balloonpath.winds.field import UniformField
from balloonpath.winds.gp import (
    BackgroundErrorField,
    Posterior,
    background_error_sigma,
    fit_wind_field,
    load_wind_field,
)
from balloonpath.winds.gp_kernels import (
    GPHyperparameters,
    altitude_profile,
    log_marginal_likelihood,
    se_kernel,
)
from balloonpath.winds.gp_sample import FastProjection
from balloonpath.winds.observations import WindObservations

T0 = 1_800_000_000.0  # an invented launch day (2027-01-15), POSIX seconds
LAT0, LON0 = -41.3, 173.2  # invented scenario "Tarnwick Plain", southern and eastern: negative latitude


def _obs(rng, n, *, alt=(8000.0, 12000.0), u=None, v=None, sigma=1.0):
    lat = LAT0 + rng.uniform(-1.0, 1.0, n)
    lon = LON0 + rng.uniform(-1.2, 1.2, n)
    alt_m = rng.uniform(*alt, n)
    t = T0 + rng.uniform(-3, 3, n) * 3600
    u = rng.normal(0, 3, n) if u is None else u
    v = rng.normal(0, 3, n) if v is None else v
    return WindObservations(t, lat, lon, alt_m, u, v, np.full(n, sigma), np.array(["test"] * n, dtype=object))


def test_rw2006_worked_example():
    # REFERENCES.md §11 ([RW2006] Alg. 2.1, computed): X = 0..4, y = sin X, SE l = 1, sf^2 = 1, sn^2 = 0.01.
    # Stationary kernel (profile "uniform": g = 1), as in the reference.
    x = np.zeros((5, 4))
    x[:, 0] = np.arange(5.0)
    y = np.sin(x[:, :1])
    hp = GPHyperparameters(1.0, 1.0, 1.0, 1.0, "uniform")
    post = Posterior(x, y, np.full(5, 0.01), hp)
    mean, var = post.mean_var(np.array([[2.5, 0, 0, 0]]))
    assert mean[0, 0] == pytest.approx(0.6012109633, rel=1e-8)
    assert var[0] == pytest.approx(0.0160467489, rel=1e-7)
    lml, _ = log_marginal_likelihood(hp.to_log(), x, y, np.full(5, 0.01), profile="uniform")
    assert lml == pytest.approx(-4.4691886467, rel=1e-9)


@pytest.mark.parametrize("profile", ["uniform", "nwp"])
def test_matches_scikit_learn(profile):
    # Reference: scikit-learn GaussianProcessRegressor with ConstantKernel * RBF(anisotropic), per-point
    # alpha = noise variance, optimizer=None: same posterior mean, latent sd and log marginal likelihood.
    # With the altitude profile, k = s^2 g(z) g(z') k0 is the covariance of g(z) f0(x), f0 ~ GP(0, s^2 k0),
    # so the data y_i / g_i with noise variance noise_i / g_i^2 are a stationary GP problem (sklearn):
    # mean = g(z*) mean0, sd = g(z*) sd0, log p(y) = log p0(y / g) - k_out sum_i log g_i (change of
    # variables; the Jacobian of y -> y / g per output).
    from sklearn.gaussian_process import GaussianProcessRegressor
    from sklearn.gaussian_process.kernels import RBF, ConstantKernel

    rng = np.random.default_rng(3)
    n = 120
    x = np.column_stack([rng.uniform(-200, 200, (n, 2)), rng.uniform(0, 15, n), rng.uniform(-4, 4, n)])
    y = rng.normal(0, 3, (n, 2))
    noise = rng.uniform(0.5, 2.0, n) ** 2
    hp = GPHyperparameters(90.0, 1.3, 3.0, 2.7, profile)
    g = altitude_profile(x[:, 2], profile)
    kernel = ConstantKernel(hp.sigma_m_s**2, "fixed") * RBF(hp.lengths(), "fixed")
    ref = GaussianProcessRegressor(kernel, alpha=noise / g**2, optimizer=None, normalize_y=False)
    ref.fit(x, y / g[:, None])
    xs = np.column_stack([rng.uniform(-300, 300, (50, 2)), rng.uniform(0, 20, 50), rng.uniform(-6, 6, 50)])
    gs = altitude_profile(xs[:, 2], profile)
    mean_ref, std_ref = ref.predict(xs, return_std=True)
    post = Posterior(x, y, noise, hp)
    mean, var = post.mean_var(xs)
    np.testing.assert_allclose(mean, gs[:, None] * mean_ref, rtol=1e-6, atol=1e-9)
    np.testing.assert_allclose(np.sqrt(var), gs * std_ref[:, 0], rtol=1e-6)
    lml, _ = log_marginal_likelihood(hp.to_log(), x, y, noise, profile=profile)
    assert lml == pytest.approx(ref.log_marginal_likelihood_value_ - 2 * np.sum(np.log(g)), rel=1e-6)
    # Full posterior covariance (sklearn predict(return_cov=True)): cov = g g^T cov0.
    _, cov_ref = ref.predict(xs, return_cov=True)
    cov_ref = cov_ref[..., 0] if cov_ref.ndim == 3 else cov_ref
    np.testing.assert_allclose(post.covariance(xs), gs[:, None] * gs[None, :] * cov_ref, rtol=1e-6, atol=1e-9)


def test_altitude_profile_shape():
    # From memory, common NWP verification practice (docs/winds-gp.md): short-range wind RMSE peaks at the
    # jet level (~250 hPa, ~10.5 km), about 0.55-0.65 of that at 850 hPa (~1.5 km) and at 100 hPa (~16 km),
    # about 0.45-0.5 at 50-10 hPa (20-30 km). Tolerances: the figures are read from memory to +-0.05.
    g = altitude_profile(np.array([1.5, 5.5, 10.5, 16.0, 20.5, 30.0]))
    h = g / g[2]  # relative to the jet level
    assert np.argmax(altitude_profile(np.linspace(0.0, 30.0, 301))) == 105  # peak at 10.5 km
    assert 0.55 <= h[0] <= 0.7 and 0.7 <= h[1] <= 0.85 and 0.6 <= h[3] <= 0.72
    assert 0.42 <= h[4] <= 0.52 and 0.42 <= h[5] <= 0.5
    # normalised: rms 1 over the 0-30 km column (the signal sd keeps its column-average meaning)
    z = np.linspace(0.0, 30.0, 3001)
    gz = altitude_profile(z)
    assert np.sqrt(np.mean(gz**2)) == pytest.approx(1.0, rel=1e-3)
    assert np.max(np.abs(np.diff(gz, 2))) < 1e-3  # smooth: no kinks (second difference at 10 m steps)
    assert np.all(altitude_profile(z, "uniform") == 1.0)
    with pytest.raises(ValueError, match="unknown altitude profile"):
        GPHyperparameters(profile="flat")


def test_gradient_matches_finite_differences():
    # Invariant ([RW2006] eq. 5.9): analytic gradient equals central differences (step 1e-5 in log space).
    rng = np.random.default_rng(4)
    x = np.column_stack([rng.uniform(-100, 100, (60, 2)), rng.uniform(0, 10, 60), rng.uniform(-3, 3, 60)])
    y = rng.normal(0, 2, (60, 2))
    theta = np.log([80.0, 1.2, 2.5, 2.0])
    _, grad = log_marginal_likelihood(theta, x, y, np.full(60, 0.3))
    for j in range(4):
        e = np.zeros(4)
        e[j] = 1e-5
        num = (log_marginal_likelihood(theta + e, x, y, np.full(60, 0.3))[0]
               - log_marginal_likelihood(theta - e, x, y, np.full(60, 0.3))[0]) / 2e-5
        assert grad[j] == pytest.approx(num, rel=1e-5)


def _draw_truth_obs(hp, n, rng, noise_sd=0.5):
    """Observations of a field drawn from a known GP (the synthetic truth), in local coordinates."""
    proj = LocalProjection(LAT0, LON0)
    x = np.column_stack([rng.uniform(-250, 250, (n, 2)), rng.uniform(1, 13, n), rng.uniform(-4, 4, n)])
    k = se_kernel(x, x, hp) + 1e-8 * np.eye(n)
    f = np.linalg.cholesky(k) @ rng.standard_normal((n, 2))
    lat, lon = proj.to_geographic(x[:, 0] * 1e3, x[:, 1] * 1e3)
    y = f + noise_sd * rng.standard_normal((n, 2))
    return WindObservations(T0 + x[:, 3] * 3600, lat, lon, x[:, 2] * 1e3, y[:, 0], y[:, 1],
                            np.full(n, noise_sd), np.array(["gp"] * n, dtype=object))


def test_learned_length_scales_recover_truth():
    # Truth drawn from a known GP; learned length scales within a factor 1.5 of it (issue #5 criterion).
    truth = GPHyperparameters(120.0, 1.0, 3.0, 3.0)
    obs = _draw_truth_obs(truth, 300, np.random.default_rng(11))
    field = fit_wind_field(obs, UniformField(0.0, 0.0), center=(LAT0, LON0, T0), rng=np.random.default_rng(1))
    hp = field.hyperparameters
    for got, want in ((hp.length_h_km, 120.0), (hp.length_z_km, 1.0), (hp.length_t_h, 3.0), (hp.sigma_m_s, 3.0)):
        assert want / 1.5 <= got <= want * 1.5


def test_variance_shrinks_near_observations_and_returns_far_away():
    rng = np.random.default_rng(5)
    obs = _obs(rng, 40, sigma=0.5)
    hp = GPHyperparameters(80.0, 1.0, 3.0, 3.0)
    field = fit_wind_field(obs, UniformField(5.0, 0.0), hyperparameters=hp, optimize=False)
    near, _ = field.std(obs.lat[:3], obs.lon[:3], obs.alt_m[:3], obs.time_s[:3])
    assert np.all(near < 0.6)  # about the observation error, far below the prior 3 m/s
    far, _ = field.std(LAT0 + 12.0, LON0, 10_000.0, T0)
    assert float(far) == pytest.approx(3.0 * float(altitude_profile(10.0)), rel=1e-6)  # prior sd s g(z)
    u_far, v_far = field.wind(LAT0 + 12.0, LON0, 10_000.0, T0)
    assert float(u_far) == pytest.approx(5.0, abs=1e-6) and float(v_far) == pytest.approx(0.0, abs=1e-6)


@pytest.mark.parametrize("platforms", [False, True])
def test_samples_match_posterior_covariance(platforms):
    # Empirical covariance of 4000 realisations at 5 points vs the exact posterior covariance.
    # Tolerance: 4 sampling sd of each covariance entry, sqrt((C_ii C_jj + C_ij^2) / N), plus the grid
    # approximation: 8 % of the local prior covariance scale s^2 g(z_i) g(z_j) (the kernel has the altitude
    # profile g; measured up to 11 % of the local prior variance at the jet-level point, where g^2 = 2.1,
    # on this 8x7x17x4 grid: the interpolated process is slightly smoother than the SE process, so near
    # observations the sampled spread is too small; the same with g = 1 and the same local sd;
    # docs/winds-gp.md).
    rng = np.random.default_rng(6)
    hp = GPHyperparameters(100.0, 1.0, 4.0, 3.0)
    obs = _draw_truth_obs(hp, 60, rng)
    if platforms:  # 4 aircraft sharing an error each: eps ~ N(0, diag + tau^2 Z Z^T) in the samples too
        src = np.array([f"aircraft-report:A{i % 4}" for i in range(len(obs))], dtype=object)
        obs = WindObservations(obs.time_s, obs.lat, obs.lon, obs.alt_m, obs.u, obs.v, obs.sigma, src)
    field = fit_wind_field(obs, UniformField(0.0, 0.0), hyperparameters=hp, optimize=False,
                           center=(LAT0, LON0, T0), shared_platform_error=platforms)
    assert field.posterior.noise.correlated == platforms
    field = field.with_corridor(LAT0 - 1.2, LAT0 + 1.2, LON0 - 1.5, LON0 + 1.5, 14_000.0,
                                T0 - 3.5 * 3600, T0 + 3.5 * 3600, alt_min_m=4_000.0)
    n = 4000
    members = field.sample(n, np.random.default_rng(7))
    pts = np.array([
        [obs.lat[0], obs.lon[0], obs.alt_m[0], obs.time_s[0]],
        [obs.lat[1], obs.lon[1], obs.alt_m[1] + 400.0, obs.time_s[1] + 1800.0],
        [LAT0 + 0.3, LON0 - 0.4, 6_000.0, T0 + 3600.0],
        [LAT0 - 1.0, LON0 + 1.3, 13_500.0, T0 - 3 * 3600.0],
        [LAT0, LON0, 10_000.0, T0],
    ])
    u = np.empty((n, 5))
    v = np.empty((n, 5))
    idx = np.arange(n)
    for j, p in enumerate(pts):
        u[:, j], v[:, j] = members.wind(idx, *(np.full(n, c) for c in p))
    xs = field._local(*pts.T)
    ks = se_kernel(field.posterior.x, xs, hp)
    cov = se_kernel(xs, xs, hp) - ks.T @ cho_solve((field.posterior.chol, True), ks)
    var = np.diag(cov)
    gz = altitude_profile(xs[:, 2])
    tol = 4 * np.sqrt((np.outer(var, var) + cov**2) / n) + 0.08 * hp.sigma_m_s**2 * np.outer(gz, gz)
    for comp in (u, v):
        assert np.all(np.abs(np.cov(comp.T) - cov) <= tol)
    # u and v are independent: cross-correlations within 4 sampling sd (1/sqrt(4000) = 1.6 %)
    cross = np.corrcoef(u.T, v.T)[:5, 5:]
    assert np.all(np.abs(cross) < 0.065)
    # the sample mean follows the (gridded) posterior mean within 4 standard errors + grid (linear
    # interpolation) error 0.15 g(z) m/s (5 % of the local prior sd s g(z))
    mean, _ = field.posterior.mean_var(xs)
    se = np.sqrt(np.diag(cov) / n)
    assert np.all(np.abs(u.mean(axis=0) - mean[:, 0]) <= 4 * se + 0.15 * gz)


def test_samples_are_deterministic_and_bounded():
    rng = np.random.default_rng(8)
    field = fit_wind_field(_obs(rng, 30), UniformField(0, 0), optimize=False)
    a = field.sample(50, np.random.default_rng(1))
    b = field.sample(50, np.random.default_rng(1))
    assert a.deviations.tobytes() == b.deviations.tobytes()
    grid = field.sample_grid(1000)
    assert grid.size * 1000 * 2 * 4 < 300e6  # issue #5: member grids (float32 u, v) < 300 MB for 1000


def test_background_error_field_samples_have_prior_sd():
    bg = UniformField(10.0, -3.0)
    field = BackgroundErrorField(bg, background_error_sigma(24.0), center=(LAT0, LON0, T0))
    assert isinstance(field.sample(1, np.random.default_rng(0)).n_members, int)
    members = field.sample(2000, np.random.default_rng(2))
    n = 2000
    u, v = members.wind(np.arange(n), np.full(n, LAT0 + 0.7), np.full(n, LON0 - 1.1),
                        np.full(n, 7_300.0), np.full(n, T0 + 5000.0))
    sigma = background_error_sigma(24.0) * float(altitude_profile(7.3))  # jet-level sd times g(z)
    # sd of a sample sd from 2000 draws: sigma / sqrt(2 * 2000) = 1.6 %; allow 5 % (3 sd)
    assert np.std(u) == pytest.approx(sigma, rel=0.05)
    assert np.std(v) == pytest.approx(sigma, rel=0.05)
    assert np.mean(u) == pytest.approx(10.0, abs=4 * sigma / np.sqrt(n))
    std_u, _ = field.std(np.full(3, LAT0), LON0, np.array([5_000.0, 10_500.0, 25_000.0]), T0)
    np.testing.assert_allclose(std_u, background_error_sigma(24.0) * altitude_profile([5.0, 10.5, 25.0]))


def test_background_error_sigma_grows_with_lead_time():
    # From memory (docs/winds-gp.md): 2.5 m/s at analysis, +0.06 m/s per hour, capped at 10 m/s.
    assert background_error_sigma(0.0) == pytest.approx(2.5)
    assert background_error_sigma(48.0) == pytest.approx(2.5 + 0.06 * 48)
    assert background_error_sigma(1000.0) == pytest.approx(10.0)


def test_fast_projection_matches_pyproj():
    # Reference: pyproj azimuthal equidistant (LocalProjection); cubic fit within 0.1 km over +-3 deg.
    proj = LocalProjection(LAT0, 179.5)
    fast = FastProjection(proj, LAT0 - 3, LAT0 + 3, 4.0)
    rng = np.random.default_rng(9)
    lat = LAT0 + rng.uniform(-2.8, 2.8, 500)
    lon = ((179.5 + rng.uniform(-3.8, 3.8, 500)) + 180) % 360 - 180  # crosses the antimeridian
    x, y = proj.to_local(lat, lon)
    fx, fy = fast.to_local_km(lat, lon)
    assert np.max(np.hypot(fx - x / 1e3, fy - y / 1e3)) < 0.1


def test_save_load_round_trip(tmp_path):
    rng = np.random.default_rng(10)
    field = fit_wind_field(_obs(rng, 50), UniformField(4.0, 1.0), optimize=False)
    path = field.save(tmp_path / "field.npz")
    again = load_wind_field(path)
    lat, lon, alt, t = LAT0 + 0.2, LON0 - 0.3, 9_500.0, T0 + 600.0
    np.testing.assert_allclose(again.wind(lat, lon, alt, t), field.wind(lat, lon, alt, t), rtol=1e-12)
    np.testing.assert_allclose(again.std(lat, lon, alt, t), field.std(lat, lon, alt, t), rtol=1e-12)
    (tmp_path / "bad.npz").write_bytes(b"not a field")
    with pytest.raises(InputDataError, match="bad.npz: file: is not a fitted wind field"):
        load_wind_field(tmp_path / "bad.npz")


def test_degenerate_inputs_do_not_crash():
    rng = np.random.default_rng(12)
    bg = UniformField(0.0, 0.0)
    # NaN rows are dropped with a warning
    obs = _obs(rng, 30)
    u = obs.u.copy()
    u[3] = np.nan
    obs = WindObservations(obs.time_s, obs.lat, obs.lon, obs.alt_m, u, obs.v, obs.sigma, obs.source)
    with pytest.warns(DataQualityWarning, match="dropped 1 of 30"):
        fit_wind_field(obs, bg, optimize=False)
    # exact duplicates are merged
    dup = _obs(rng, 25).select(np.r_[np.arange(25), np.arange(25)])
    with pytest.warns(DataQualityWarning, match="merged 25 duplicate"):
        field = fit_wind_field(dup, bg, optimize=False)
    assert np.all(np.isfinite(field.std(dup.lat, dup.lon, dup.alt_m, dup.time_s)[0]))
    # all observations at one altitude and one time: those length scales are not learned
    flat = _obs(rng, 40, alt=(10_000.0, 10_000.0))
    flat = WindObservations(np.full(40, T0), *(getattr(flat, f) for f in ("lat", "lon", "alt_m", "u", "v",
                                                                           "sigma", "source")))
    with pytest.warns(FitWarning, match="too little in vertical, time"):
        field = fit_wind_field(flat, bg, rng=np.random.default_rng(0))
    assert field.hyperparameters.length_z_km == GPHyperparameters().length_z_km
    # a single aircraft: a handful of reports along one track -> defaults, warning
    one = _obs(rng, 5)
    with pytest.warns(FitWarning, match="only 5 observations"):
        field = fit_wind_field(one, bg)
    # nothing usable: background-error field
    with pytest.warns(FitWarning, match="no usable observations"):
        field = fit_wind_field(WindObservations.empty(), bg, center=(LAT0, LON0))
    assert isinstance(field, BackgroundErrorField)


def test_fused_field_halves_background_error_on_invented_scenario():
    # Invented scenario: truth = synthetic atmosphere; background = truth + smooth 4 m/s error;
    # observations = the truth wind at simulated aircraft states (balloonpath.winds.traffic), thinned to one
    # report per aircraft per 2 minutes, with 1.5 m/s noise. The corridor check: points within 120 km of
    # the centre, 3-12 km altitude (where aircraft fly), inside the observation window.
    from balloonpath.winds.synthetic import SyntheticAtmosphereField
    from balloonpath.winds.traffic import simulate_traffic

    rng = np.random.default_rng(13)
    truth = SyntheticAtmosphereField(LAT0, LON0, T0, seed=3)
    background = truth.perturbed(seed=4, amplitude_m_s=4.0)
    traffic = simulate_traffic(truth, LAT0, LON0, T0, 3 * 3600.0, rng, n_aircraft=30, step_s=120.0)
    act = traffic.active & (traffic.alt_m > 2000.0)
    n = int(act.sum())
    obs = WindObservations(
        np.broadcast_to(traffic.time_s[:, None], act.shape)[act], traffic.lat[act], traffic.lon[act],
        traffic.alt_m[act], traffic.wind_u[act] + rng.normal(0, 1.5, n),
        traffic.wind_v[act] + rng.normal(0, 1.5, n), np.full(n, 1.5), np.array(["aircraft"] * n, dtype=object),
    )
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", FitWarning)
        field = fit_wind_field(obs, background, center=(LAT0, LON0, T0 + 5400.0), rng=np.random.default_rng(0))
    proj = LocalProjection(LAT0, LON0)
    m = 800
    r = 120e3 * np.sqrt(rng.uniform(0, 1, m))
    az = rng.uniform(0, 2 * np.pi, m)
    lat, lon = proj.to_geographic(r * np.sin(az), r * np.cos(az))
    alt = rng.uniform(3000.0, 12000.0, m)
    t = T0 + rng.uniform(0.5, 2.5, m) * 3600
    ut, vt = truth.wind(lat, lon, alt, t)
    ub, vb = background.wind(lat, lon, alt, t)
    uf, vf = field.wind(lat, lon, alt, t)
    rmse_bg = np.sqrt(np.mean((ub - ut) ** 2 + (vb - vt) ** 2))
    rmse_fused = np.sqrt(np.mean((uf - ut) ** 2 + (vf - vt) ** 2))
    assert rmse_fused <= 0.5 * rmse_bg


def test_shared_aircraft_error_reduces_information():
    # 10 observations from ONE aircraft (noise Sigma = diag(s^2) + tau^2 1 1^T) vs from 10 aircraft
    # (Sigma diagonal with s^2 + tau^2): same total variance per observation, but the shared error does not
    # average out, so the posterior sd near them is larger. Checked against an independent numpy solve of
    # [RW2006] eqs. 2.22-2.24 with a general noise covariance: mean = K*^T (K + Sigma)^-1 y,
    # cov = K** - K*^T (K + Sigma)^-1 K*.
    from balloonpath.winds.gp import Posterior, aircraft_shared_error_sigma
    from balloonpath.winds.gp_kernels import NoiseCovariance

    tau = aircraft_shared_error_sigma(0.5, 230.0)
    assert tau == pytest.approx(2 * 230.0 * np.sin(np.radians(0.25)) / np.sqrt(2), rel=1e-12)  # 1.42 m/s
    rng = np.random.default_rng(21)
    hp = GPHyperparameters(100.0, 1.0, 4.0, 3.0, profile="uniform")
    x = np.column_stack([np.linspace(-40, 40, 10), rng.uniform(-10, 10, 10), np.full(10, 10.0),
                         np.zeros(10)])
    y = rng.normal(size=(10, 2))
    var = np.full(10, 1.0)
    xs = np.array([[0.0, 0.0, 10.0, 0.0], [60.0, 30.0, 9.5, 1.0]])
    sd = {}
    for name, group in (("one", np.zeros(10, int)), ("ten", np.arange(10))):
        post = Posterior(x, y, var, hp, noise_group=group, group_var=tau**2)
        mean, v = post.mean_var(xs)
        same = group[:, None] == group[None, :]
        sigma = np.diag(var) + tau**2 * same  # textbook general noise covariance
        k = np.array([[hp.sigma_m_s**2 * np.exp(-0.5 * np.sum(((a - b) / hp.lengths()) ** 2))
                       for b in x] for a in xs])  # (2, 10), SE kernel written out
        kxx = np.array([[hp.sigma_m_s**2 * np.exp(-0.5 * np.sum(((a - b) / hp.lengths()) ** 2))
                         for b in x] for a in x])
        ref_mean = k @ np.linalg.solve(kxx + sigma, y)
        ref_var = hp.sigma_m_s**2 - np.sum(k * np.linalg.solve(kxx + sigma, k.T).T, axis=1)
        np.testing.assert_allclose(mean, ref_mean, rtol=1e-8, atol=1e-10)
        np.testing.assert_allclose(v, ref_var, rtol=1e-8, atol=1e-10)
        sd[name] = np.sqrt(v)
        # the Matheron noise draws have the covariance Sigma (blockwise Cholesky)
        eps = NoiseCovariance(var, group, tau**2).draw(rng.standard_normal((10, 20_000)))
        assert np.all(np.abs(np.cov(eps) - sigma) < 4 * np.sqrt((1 + tau**2) ** 2 * 2 / 20_000))
    assert np.all(sd["one"] > sd["ten"] + 0.05)


def test_covariance_diagonal_is_the_variance_exact_dtc_and_scaled():
    # The posterior covariance's diagonal equals mean_var's variance (exact GP and the DTC approximation),
    # and a field's covariance carries its spread factor squared (std carries it once).
    rng = np.random.default_rng(8)
    obs = _obs(rng, 300)
    bg = UniformField(10.0, 0.0)
    hp = GPHyperparameters(120.0, 1.5, 4.0, 3.0)
    exact = fit_wind_field(obs, bg, hyperparameters=hp, optimize=False)
    dtc = fit_wind_field(obs, bg, hyperparameters=hp, optimize=False, max_exact=100, n_inducing=80)
    assert dtc.posterior.sparse and not exact.posterior.sparse
    lat = LAT0 + rng.uniform(-1, 1, 40)
    lon = LON0 + rng.uniform(-1, 1, 40)
    alt = rng.uniform(0, 20_000, 40)
    t = T0 + rng.uniform(-2, 2, 40) * 3600
    for field in (exact, dtc):
        xs = field._local(lat, lon, alt, t)
        _, var = field.posterior.mean_var(xs)
        cov = field.posterior.covariance(xs)
        np.testing.assert_allclose(np.diag(cov), var, rtol=1e-9, atol=1e-9)
        assert np.min(np.linalg.eigvalsh(cov)) > -1e-8 * np.max(np.diag(cov))
        scaled = field.with_spread_factor(0.6)
        np.testing.assert_allclose(scaled.covariance(lat, lon, alt, t), 0.36 * field.covariance(lat, lon, alt, t),
                                   rtol=1e-12)
        np.testing.assert_allclose(scaled.std(lat, lon, alt, t)[0], 0.6 * field.std(lat, lon, alt, t)[0], rtol=1e-12)
        np.testing.assert_array_equal(scaled.wind(lat, lon, alt, t)[0], field.wind(lat, lon, alt, t)[0])
    prior = BackgroundErrorField(bg, 3.0, center=(LAT0, LON0))
    np.testing.assert_allclose(np.sqrt(np.diag(prior.covariance(lat, lon, alt, t))), prior.std(lat, lon, alt, t)[0],
                               rtol=1e-12)
    with pytest.raises(ValueError, match="spread factor"):
        exact.with_spread_factor(0.0)
