"""DEM-error Monte Carlo (invented scenes on the Mars sphere of tests/scenes.py).

Known truths used here:
* a height error e shifts a nadir echo by −2e/c (two-way delay, common practice), so over a
  flat DEM whose error is correlated over much more than the pulse-limited footprint the
  spread of the echo's delay across realisations is 2σ/c;
* the error field's RMS and correlation length are those asked for (estimated over many seeds,
  with the known zero mean, so the estimators are unbiased up to the lag interpolation);
* a realisation's error field is the same for the same seed (reproducibility).
"""

import dataclasses
import math

import numpy as np
import pytest
from scenes import MARS_RADIUS_M, flat_geographic, write_geotiff

from cluttersim import default_config
from cluttersim.constants import SPEED_OF_LIGHT_M_S
from cluttersim.io.dem import DemSource
from cluttersim.analysis.dem_error import (
    DemErrorConfig,
    correlated_field_m,
    explained_probability,
    roughened_surface,
    simulate_dem_error,
)
from cluttersim.errors import ConfigError, DemError
from cluttersim.track import great_circle_track

M_PER_DEG = math.pi / 180.0 * MARS_RADIUS_M
ALT_M = 25e3
DT_S = 37.5e-9  # the built-in radar's sample interval


def small_radar(samples=256):
    cfg = default_config()
    return dataclasses.replace(cfg, radar=dataclasses.replace(cfg.radar, samples=samples))


@pytest.fixture(scope="module")
def flat(tmp_path_factory):
    path = flat_geographic(tmp_path_factory.mktemp("flat") / "flat.tif", 0.005, half_width_deg=1.0)
    src = DemSource.open(path)
    # four traces 20 km apart: their errors are independent for L = 5 km (exp(-16))
    track = great_circle_track(src.body, -0.6, 0.0, 0.6, 0.0, ALT_M, 20e3)
    return src, track


def leading_edge_delay_s(power, window_start_s, dt_s):
    """Delay where each trace first reaches half its peak power (linear interpolation)."""
    out = np.empty(power.shape[0])
    for i, row in enumerate(power):
        half = 0.5 * np.nanmax(row)
        k = int(np.argmax(row >= half))
        frac = (half - row[k - 1]) / (row[k] - row[k - 1])
        out[i] = window_start_s[i] + (k - 1 + frac) * dt_s
    return out


def test_flat_dem_echo_delay_spread_is_two_sigma_over_c(flat):
    src, track = flat
    sigma = 20.0
    n = 48
    ds = simulate_dem_error(src, track, small_radar(), DemErrorConfig(sigma, 5000.0, realisations=n, seed=3),
                            keep_realisations=True)  # fmt: skip
    start = ds["window_start"].values
    delays = np.array([leading_edge_delay_s(p, start, DT_S) for p in ds["power_realisations"].values])  # (N, trace)
    nominal = leading_edge_delay_s(ds["power_nominal"].values, start, DT_S)
    shifts = delays - nominal  # true shift of realisation k at trace i: -2 e_k(nadir_i) / c
    expected = 2.0 * sigma / SPEED_OF_LIGHT_M_S  # 133 ns (common practice: two-way delay 2h/c)
    spread = np.sqrt(np.mean(shifts**2))  # zero-mean truth: RMS over realisations and traces
    m = shifts.size
    # the RMS of m Gaussian values has relative standard error 1/sqrt(2m) (~5 % here): allow 3 of them
    assert spread == pytest.approx(expected, rel=3.0 / math.sqrt(2 * m))
    # the measured echo shift follows the error field's nadir height (the record's nadir delay)
    field_shift = ds["nadir_delay_std"].values
    assert np.all(np.abs(field_shift / expected - 1.0) < 4.0 / math.sqrt(2 * (n - 1)))
    # and the mean echo delay is unbiased within its Monte Carlo uncertainty
    assert abs(shifts.mean()) < 3.0 * expected / math.sqrt(m)


def test_mean_power_matches_error_free_run(flat):
    src, track = flat
    n = 32
    ds = simulate_dem_error(src, track, small_radar(), DemErrorConfig(1.0, 5000.0, realisations=n, seed=5),
                            keep_realisations=True)  # fmt: skip
    real = ds["power_realisations"].values.astype(np.float64)
    nominal = ds["power_nominal"].values.astype(np.float64)
    # total power per trace: a shift moves it in delay but keeps it
    totals = real.sum(axis=2)
    se = totals.std(axis=0, ddof=1) / math.sqrt(n)
    assert np.all(np.abs(totals.mean(axis=0) - nominal.sum(axis=1)) <= 3.0 * se + 1e-6 * nominal.sum(axis=1))
    # per sample, for σ small beside the range resolution (2σ/c = 0.18 sample)
    mean = ds["power"].values.astype(np.float64)
    se = ds["power_std"].values.astype(np.float64) / math.sqrt(n)
    strong = nominal > 1e-3 * nominal.max()
    z = np.abs(mean - nominal)[strong] / np.maximum(se[strong], 1e-9 * nominal.max())
    assert np.mean(z < 3.0) > 0.97
    # the quantiles bracket the median and the nominal run
    assert np.all(ds["power_q05"].values <= ds["power_q50"].values)
    assert np.all(ds["power_q50"].values <= ds["power_q95"].values)


def test_same_seed_same_products_other_seed_differs(flat):
    src, track = flat
    cfg = small_radar(128)
    a = simulate_dem_error(src, track, cfg, DemErrorConfig(10.0, 3000.0, realisations=4, seed=7))
    b = simulate_dem_error(src, track, cfg, DemErrorConfig(10.0, 3000.0, realisations=4, seed=7))
    c = simulate_dem_error(src, track, cfg, DemErrorConfig(10.0, 3000.0, realisations=4, seed=8))
    for name in ("power", "power_q05", "power_q50", "power_q95", "nadir_delay_std"):
        np.testing.assert_array_equal(a[name].values, b[name].values)
    assert not np.array_equal(a["power_q50"].values, c["power_q50"].values)


def test_hill_with_large_error_has_wide_band_only_at_its_echo(tmp_path):
    """A 600 m hill 8 km east of the track, RMS error 40 m on it and 0.5 m elsewhere."""
    res = 0.005
    n = int(1.0 / res)
    ax = (np.arange(n) + 0.5) * res - 0.5
    lon, lat = np.meshgrid(ax, -ax)
    d2 = ((lon - 8000.0 / M_PER_DEG) ** 2 + lat**2) * M_PER_DEG**2
    elev = 600.0 * np.exp(-d2 / (2 * 1500.0**2))
    write_geotiff(tmp_path / "hill.tif", elev, -0.5, 0.5, res)
    write_geotiff(tmp_path / "rms.tif", np.where(d2 < 3500.0**2, 40.0, 0.5), -0.5, 0.5, res)
    src = DemSource.open(tmp_path / "hill.tif")
    track = great_circle_track(src.body, -0.02, 0.0, 0.02, 0.0, ALT_M, 1000.0)
    err = DemErrorConfig(0.5, 1000.0, realisations=24, seed=1, rms_map=str(tmp_path / "rms.tif"))
    ds = simulate_dem_error(src, track, small_radar(), err)
    band_db = 10 * np.log10(ds["power_q95"].values / ds["power_q05"].values)
    # the hill's echo, geometrically: ranges from each antenna of the cells given the 40 m error
    body = src.body
    hill = d2 < 3500.0**2
    cells = body.geodetic_to_ecef_m(lat[hill], lon[hill], elev[hill])
    ant = body.geodetic_to_ecef_m(track.lat_deg, track.lon_deg, track.alt_m)
    for i in range(len(track)):
        r = np.linalg.norm(cells - ant[i], axis=1)
        k_lo = int((2 * r.min() / SPEED_OF_LIGHT_M_S - ds["window_start"].values[i]) / DT_S)
        k_hi = int((2 * r.max() / SPEED_OF_LIGHT_M_S - ds["window_start"].values[i]) / DT_S) + 1
        k_nadir = int(round((ds["nadir_delay"].values[i] - ds["window_start"].values[i]) / DT_S))
        assert band_db[i, k_lo:k_hi].max() > 6.0
        elsewhere = np.ones(band_db.shape[1], dtype=bool)
        reach = int(math.ceil(3 * 40.0 / (0.5 * SPEED_OF_LIGHT_M_S * DT_S)))  # ±3σ of range, in samples
        elsewhere[k_lo - reach : k_hi + reach] = False
        elsewhere[: k_nadir + 4] = False  # before and on the leading edge (a 0.5 m shift of a steep edge)
        assert np.median(band_db[i, elsewhere]) < 0.5
        assert np.percentile(band_db[i, elsewhere], 95) < 1.0


@pytest.mark.parametrize("corr_cells", [4.0, 8.0])
def test_error_field_rms_and_correlation_length_recovered(corr_cells):
    """Known truth: RMS σ and covariance σ² exp(-(r/L)²); estimated with the known zero mean over 24 seeds."""
    sigma, dx = 7.0, 50.0
    corr_m = corr_cells * dx
    lag = int(corr_cells)
    rms, length = [], []
    for seed in range(24):
        e = correlated_field_m((128, 160), (dx, dx), sigma, corr_m, np.random.default_rng(seed))
        c0 = np.mean(e * e)
        rho = 0.5 * (np.mean(e[:, :-lag] * e[:, lag:]) + np.mean(e[:-lag, :] * e[lag:, :])) / c0
        rms.append(math.sqrt(c0))
        length.append(lag * dx / math.sqrt(-math.log(rho)))  # ρ(r) = exp(-(r/L)²) solved for L
    rms, length = np.array(rms), np.array(length)
    se_rms = rms.std(ddof=1) / math.sqrt(rms.size)
    se_len = length.std(ddof=1) / math.sqrt(length.size)
    assert abs(rms.mean() - sigma) < 3 * se_rms + 0.01 * sigma  # bias within its quoted uncertainty (+1 %)
    assert abs(length.mean() - corr_m) < 3 * se_len + 0.02 * corr_m
    assert rms.std(ddof=1) < 0.25 * sigma  # one field already gives a usable RMS


def test_independent_cells_when_correlation_is_zero():
    e = correlated_field_m((200, 200), (10.0, 10.0), 3.0, 0.0, np.random.default_rng(0))
    assert np.std(e) == pytest.approx(3.0, rel=0.02)
    assert abs(np.mean(e[:, 1:] * e[:, :-1])) / 9.0 < 0.02


def test_explained_probability_known_truth():
    """Realisations S_k = P 10^(U/10), U ~ N(μ, s), and a rule "explained when S ≥ P 10^(-X/10)": the rule
    holds with probability Φ((μ + X)/s) (normal CDF, SciPy); the estimated share is unbiased within its
    uncertainty over many seeds, its quoted binomial error is right, and undetected samples get NaN."""
    from scipy.stats import norm

    mu, s, x, n = -4.0, 3.0, 3.0, 32
    truth = norm.cdf((mu + x) / s)
    means, singles, quoted = [], [], []
    obs = np.full((3, 50), 10.5)
    detected = np.ones(obs.shape, bool)
    detected[:, -1] = False
    for seed in range(40):
        rng = np.random.default_rng(seed)
        sims = obs[None] * 10 ** (rng.normal(mu, s, size=(n, 3, 50)) / 10)
        p, se = explained_probability(lambda sim: sim >= obs * 10 ** (-x / 10), sims, detected)
        assert np.all(np.isnan(p[:, -1]))
        p, se = p[:, :-1], se[:, :-1]
        means.append(np.mean(p))
        singles.append(p[0, 0])
        quoted.append(np.mean(se))
    means = np.array(means)
    assert abs(means.mean() - truth) < 3 * means.std(ddof=1) / math.sqrt(means.size)
    # the quoted binomial error matches the spread of single-sample estimates
    assert np.mean(quoted) == pytest.approx(math.sqrt(truth * (1 - truth) / n), rel=0.1)
    assert np.std(singles, ddof=1) == pytest.approx(math.sqrt(truth * (1 - truth) / n), rel=0.35)


def test_roughened_surface_adds_slopes_in_quadrature():
    cfg = default_config()
    rough = roughened_surface(cfg.surface, math.degrees(math.atan(0.05)))
    # Hagfors C = 1/s²: s² = 1/400 + 0.05² → C = 1/(0.0025 + 0.0025) = 200
    assert rough.params["C"] == pytest.approx(200.0)
    with pytest.raises(ConfigError, match="subcell_rms_slope_deg"):
        roughened_surface(dataclasses.replace(cfg.surface, law="lambert", params={}), 2.0)


def test_config_errors_name_the_key(tmp_path):
    with pytest.raises(ConfigError, match="rms_m"):
        DemErrorConfig(rms_m=-1.0, correlation_m=10.0)
    with pytest.raises(ConfigError, match="realisations"):
        DemErrorConfig(rms_m=1.0, correlation_m=10.0, realisations=1)
    with pytest.raises(ConfigError, match="unknown key 'sigma'"):
        DemErrorConfig.from_dict({"rms_m": 1.0, "correlation_m": 5.0, "sigma": 2})
    with pytest.raises(ConfigError, match="RMS_M,CORR_M"):
        DemErrorConfig.parse_option("10")
    assert DemErrorConfig.parse_option("10,2000", realisations=8) == DemErrorConfig(10.0, 2000.0, realisations=8)
    (tmp_path / "r.toml").write_text("[dem_error]\nrms_m = 5.0\ncorrelation_m = 800.0\nseed = 2\n")
    assert DemErrorConfig.from_toml(tmp_path / "r.toml") == DemErrorConfig(5.0, 800.0, seed=2)


def test_rms_map_on_another_grid_is_refused(flat, tmp_path):
    src, track = flat
    write_geotiff(tmp_path / "rms.tif", np.ones((10, 10)), -1.0, 1.0, 0.2)
    with pytest.raises(DemError, match="expected the DEM's grid"):
        simulate_dem_error(src, track, small_radar(128), DemErrorConfig(1.0, 100.0, realisations=2,
                                                                      rms_map=str(tmp_path / "rms.tif")))  # fmt: skip


def test_simulate_command_writes_dem_error_products(flat, tmp_path):
    from click.testing import CliRunner

    from cli.main import cli

    src, track = flat
    track.to_csv(tmp_path / "track.csv")
    (tmp_path / "radar.toml").write_text("[radar]\nsamples = 128\n[dem_error]\nrms_m = 5.0\ncorrelation_m = 3000.0\n")
    args = ["simulate", "--dem", str(src.path), "--track", str(tmp_path / "track.csv"), "--radar",
            str(tmp_path / "radar.toml"), "--out", str(tmp_path / "run"), "--realisations", "3", "-q"]  # fmt: skip
    result = CliRunner().invoke(cli, args)
    assert result.exit_code == 0, result.output
    import xarray as xr

    with xr.open_dataset(tmp_path / "run" / "dem_error.nc") as ds:
        assert ds.attrs["dem_error_realisations"] == 3 and ds.attrs["dem_error_rms_m"] == 5.0
        assert {"power_q05", "power_q50", "power_q95", "power_nominal"} <= set(ds.data_vars)
    assert (tmp_path / "run" / "dem_error.png").stat().st_size > 0
    again = CliRunner().invoke(cli, args)  # products exist: refused, one line, exit 2
    assert again.exit_code == 2 and "already exists" in again.output
    bad = CliRunner().invoke(cli, args[:-3] + ["--out", str(tmp_path / "run2"), "--dem-error", "5"])
    assert bad.exit_code == 1 and "RMS_M,CORR_M" in bad.output and not (tmp_path / "run2").exists()


def test_compare_gives_candidates_a_probability(flat):
    """Observed = an independent DEM realisation (another seed) + noise, plus an invented echo 20 dB below
    the peak 25 samples before the surface, where no realisation has any: the comparison against the
    realisations explains most detected samples with a high probability and gives that echo ~0."""
    from cluttersim.analysis.compare import compare
    from cluttersim.io.observed import ObservedRadargram

    src, track = flat
    cfg = small_radar()
    sim = simulate_dem_error(src, track, cfg, DemErrorConfig(3.0, 5000.0, realisations=16, seed=1),
                             keep_realisations=True)  # fmt: skip
    truth = simulate_dem_error(src, track, cfg, DemErrorConfig(3.0, 5000.0, realisations=2, seed=99),
                               keep_realisations=True)  # fmt: skip
    rng = np.random.default_rng(0)
    obs = truth["power_realisations"].values[0].astype(np.float64)
    peak = np.nanmax(obs)
    k_nadir = np.rint((sim["nadir_delay"].values - sim["window_start"].values) / DT_S).astype(int)
    k_ref = k_nadir - 25
    rows = np.arange(obs.shape[0])
    obs[rows, k_ref] += 0.01 * peak
    obs = obs + rng.exponential(peak * 1e-6, obs.shape)  # noise 60 dB below the peak
    observed = ObservedRadargram(power=obs, sample_interval_s=DT_S, window_start_s=sim["window_start"].values,
                                 track=track, source="invented")  # fmt: skip
    result = compare(observed, sim)
    p = result.dataset["explained_probability"].values
    assert np.nanmin(p) >= 0 and np.nanmax(p) <= 1
    assert np.all(p[rows, k_ref] <= 0.1)
    detected = np.isfinite(p)
    others = detected.copy()
    others[rows, k_ref] = False
    assert np.mean(p[others] >= 0.5) > 0.9
    at_ref = [c for c in result.candidates if abs(c["grid_sample"] - k_ref[c["trace"]]) <= 1]
    assert at_ref and all(c["explained_probability"] <= 0.1 for c in at_ref)


def test_nominal_power_is_the_ordinary_run(flat):
    """The Monte Carlo's error-free pass is the ordinary simulation (same scene path, same kernel):
    a simulation compared with itself gives zero difference (to float32 rounding)."""
    from cluttersim.simulate import simulate

    src, track = flat
    cfg = small_radar(128)
    ds = simulate_dem_error(src, track, cfg, DemErrorConfig(5.0, 3000.0, realisations=2))
    ref = simulate(src, track, cfg, sources=False)
    np.testing.assert_allclose(ds["power_nominal"].values, ref["power"].values, rtol=1e-5, atol=0)
    np.testing.assert_array_equal(ds["window_start"].values, ref["window_start"].values)
    assert ds.attrs["power_convention"] == ref.attrs["power_convention"]  # read back on the same scale
