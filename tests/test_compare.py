"""Comparison with observed radargrams: resampling, matching, alignment, gain, candidates (invented data).

The "observed" radargrams are made here from a small simulation by independent
means: a cubic spline (SciPy) moves the simulated echoes to a known delay on
another sample grid, a reflector is added with the Hann-weighted compressed-pulse
formula written out below, and the noise is exponential (single-look power).
"""

from __future__ import annotations

import math

import numpy as np
import pyproj
import pytest
from scipy.integrate import quad
from scipy.interpolate import CubicSpline
from scipy.optimize import brentq

from cluttersim import Track, simulate
from cluttersim.analysis.compare import CompareSettings, body_of, compare, compare_to_dir, match_traces
from cluttersim.analysis.compare_detect import (
    NoiseFloor, candidate_score, continuity_fraction, detect_unexplained, gamma_looks_sf, noise_floor,
    parabolic_peak_offset, ratio_p_value,
)  # fmt: skip
from cluttersim.analysis.compare_grid import cubic_convolution, resample_bin_mean_power
from cluttersim.io.observed import ObservedRadargram
from scenes import UTM_X0_M, UTM_Y0_M, utm_grid, utm_track, write_utm
from test_attribution import AIRBORNE, config

C = 299_792_458.0  # m/s, SI definition
DT = AIRBORNE["sample_interval_s"]  # 10 ns
B = AIRBORNE["bandwidth_hz"]  # 20 MHz
NTRACE = 60
GAIN_DB = 23.0  # invented calibration difference, observed / simulated
NOISE_BELOW_PEAK_DB = 45.0
ICE = 3.15  # ε′ of water ice (common practice, as in the README)


def hill_scene(directory):
    """A level plain with a round hill 500 m east of the track; the track climbs 1000 → 1100 m
    so that the simulated ("auto") windows start at a different delay on every trace."""
    res, n = 10.0, 240
    east, north = utm_grid(n, res)
    r2 = (east - UTM_X0_M - 500.0) ** 2 + (north - UTM_Y0_M) ** 2
    z = np.clip(np.sqrt(np.clip(200.0**2 - r2, 0, None)) - 80.0, 0, None)
    dem = write_utm(directory / "hill.tif", z, res)
    base = utm_track(np.full(NTRACE, UTM_X0_M - 100.0), UTM_Y0_M + np.linspace(-600, 600, NTRACE), 1000.0)
    track = Track(base.lat_deg, base.lon_deg, np.linspace(1000.0, 1100.0, NTRACE), time_s=0.5 * np.arange(NTRACE),
                  source="hill track")  # fmt: skip
    # a steep Gaussian law (2° rms slope): the plain itself returns little beyond nadir
    cfg = config("gaussian", samples=384, rms_slope_deg=2.0, rho=0.1)
    return dem, track, cfg


@pytest.fixture(scope="module")
def scene(tmp_path_factory):
    d = tmp_path_factory.mktemp("hill")
    dem, track, cfg = hill_scene(d)
    return dem, track, cfg, simulate(dem, track, cfg)


def hann_pulse_power(t_s, bandwidth_hz):
    """|h|² of the Hann-weighted compressed pulse, h(x) = sinc(x) + ½[sinc(x−1) + sinc(x+1)], x = Bt
    (Curlander & McDonough 1991, ch. 3; Harris 1978 window coefficients), 1 at t = 0."""
    x = bandwidth_hz * np.asarray(t_s)
    return (np.sinc(x) + 0.5 * (np.sinc(x - 1) + np.sinc(x + 1))) ** 2


def observe(sim, *, shift_samples, seed, reflector_depth_m=None, reflector_below_peak_db=22.0, samples=520):
    """An invented observed radargram of `sim`'s track.

    Recorded on a constant window start 20 samples before the earliest simulated window,
    with the echoes `shift_samples` later than simulated (scalar or per trace), power
    scaled by GAIN_DB, and exponential noise whose median is NOISE_BELOW_PEAK_DB below
    the simulated peak (before the gain).
    """
    rng = np.random.default_rng(seed)
    p = np.nan_to_num(sim["power"].values.astype(np.float64))
    ws_sim = sim["window_start"].values
    peak = p.max()
    start = float(ws_sim.min() - 20 * DT)
    recorded = start + np.arange(samples) * DT
    shift = np.broadcast_to(np.asarray(shift_samples, dtype=np.float64), (p.shape[0],))
    obs = np.zeros((p.shape[0], samples))
    k = np.arange(p.shape[1])
    for i in range(p.shape[0]):
        true_delay = recorded - shift[i] * DT
        spline = CubicSpline(ws_sim[i] + k * DT, p[i])
        inside = (true_delay >= ws_sim[i]) & (true_delay <= ws_sim[i] + k[-1] * DT)
        obs[i, inside] = np.clip(spline(true_delay[inside]), 0, None)
        if reflector_depth_m is not None:
            # two-way delay below the surface: Δt = 2 d √ε′ / c (common practice)
            tau = sim["nadir_delay"].values[i] + 2 * reflector_depth_m * math.sqrt(ICE) / C
            obs[i] += peak * 10 ** (-reflector_below_peak_db / 10) * hann_pulse_power(true_delay - tau, B)
    noise_median = peak * 10 ** (-NOISE_BELOW_PEAK_DB / 10)
    # exponential power with median m has mean m / ln 2 (Goodman 1976)
    obs = (obs + rng.exponential(noise_median / math.log(2), obs.shape)) * 10 ** (GAIN_DB / 10)
    return obs, np.full(p.shape[0], start)


def observed(sim, track, **kw):
    power, start = observe(sim, **kw)
    return ObservedRadargram(power=power, sample_interval_s=DT, window_start_s=start, track=track, source="invented")


# --------------------------------------------------------------------------- building blocks


def test_bin_mean_equals_the_integral_of_the_linear_interpolant():
    """Reference: scipy.integrate.quad over numpy.interp (edge samples held over their half interval)."""
    rng = np.random.default_rng(3)
    p = rng.random((1, 12))
    start, dt = 1.0e-6, 0.2e-6
    t = start + np.arange(12) * dt

    def interpolant(x):
        return np.interp(x, np.concatenate([[t[0] - dt / 2], t, [t[-1] + dt / 2]]), np.concatenate([p[0, :1], p[0], p[0, -1:]]))

    edges = np.sort(rng.uniform(t[0] - dt / 2, t[-1] + dt / 2, 9))[None, :]
    got = resample_bin_mean_power(p, [start], dt, edges)[0]
    for k in range(8):
        ref = quad(interpolant, edges[0, k], edges[0, k + 1], limit=200, points=t)[0] / (edges[0, k + 1] - edges[0, k])
        assert got[k] == pytest.approx(ref, rel=1e-9)
    # same grid, no shift: (P[l−1] + 6 P[l] + P[l+1]) / 8 (integral of the linear interpolant)
    same = resample_bin_mean_power(p, [start], dt, (start + (np.arange(13) - 0.5) * dt)[None, :])
    np.testing.assert_allclose(same[0, 1:-1], (p[0, :-2] + 6 * p[0, 1:-1] + p[0, 2:]) / 8, rtol=1e-12)


def test_bin_mean_marks_bins_outside_the_data_or_touching_nan():
    p = np.array([[1.0, 2.0, np.nan, 4.0, 5.0, 6.0]])
    edges = np.array([[-1.0, -0.5, 0.5, 1.5, 3.5, 4.5, 5.5, 6.0]])
    got = resample_bin_mean_power(p, [0.0], 1.0, edges)[0]
    assert np.isnan(got[0])  # before the first sample's interval
    assert got[1] == pytest.approx((1 + 6 * 1 + 2) / 8)  # the first sample held over its outer half
    assert np.isnan(got[2]) and np.isnan(got[3])  # these bins use the NaN sample
    assert got[4] == pytest.approx((4 + 6 * 5 + 6) / 8)
    assert got[5] == pytest.approx((5 + 6 * 6 + 6) / 8)
    assert np.isnan(got[6])  # past the last sample's interval


def test_parabolic_peak_is_the_vertex_of_the_parabola():
    # y = 5 − 2 (x − 0.3)² sampled at −1, 0, 1: vertex at +0.3 (Céspedes et al. 1995, parabolic fit)
    y = [5 - 2 * (x - 0.3) ** 2 for x in (-1, 0, 1)]
    assert parabolic_peak_offset(*y) == pytest.approx(0.3, abs=1e-12)
    assert parabolic_peak_offset(1.0, 1.0, 1.0) == 0.0  # flat: no peak


def test_traces_match_by_time_and_far_ones_are_reported(scene):
    _, track, _, sim = scene
    body = body_of(sim)
    # an observed track every third simulated trace, times shifted by a tenth of a trace interval,
    # and its last two traces displaced 1 km west
    idx = np.arange(0, NTRACE, 3)
    lon = track.lon_deg[idx].copy()
    geod = pyproj.Geod(a=body.semi_major_m, b=body.semi_minor_m)
    lon[-2:], _, _ = geod.fwd(lon[-2:], track.lat_deg[idx][-2:], [270.0, 270.0], [1000.0, 1000.0])
    obs_track = Track(track.lat_deg[idx], lon, track.alt_m[idx], time_s=track.time_s[idx] + 0.05, source="obs")
    m = match_traces(obs_track, sim, body, tolerance_m=50.0)
    assert m.method == "time"
    np.testing.assert_array_equal(m.sim_index[:-2], idx[:-2])
    np.testing.assert_array_equal(m.unmatched_traces, [len(idx) - 2, len(idx) - 1])
    # distances are geodesic ground distances (pyproj): 1 km for the displaced traces
    np.testing.assert_allclose(m.distance_m[-2:], 1000.0, rtol=1e-6)
    np.testing.assert_allclose(m.distance_m[:-2], 0.0, atol=1e-6)
    # without times: nearest position; default tolerance = median simulated spacing (1200 m / 59)
    untimed = Track(obs_track.lat_deg, obs_track.lon_deg, obs_track.alt_m, source="obs")
    m2 = match_traces(untimed, sim, body)
    assert m2.method == "position" and m2.tolerance_m == pytest.approx(1200.0 / 59, rel=0.01)
    np.testing.assert_array_equal(m2.sim_index[:-2], idx[:-2])
    assert (m2.sim_index[-2:] == -1).all()


def test_cubic_convolution_is_exact_at_samples_and_on_quadratics():
    """Keys (1981): the a = −½ kernel interpolates the samples and reproduces polynomials up to degree 2."""
    rng = np.random.default_rng(2)
    v = rng.random((3, 20))
    k = np.arange(20, dtype=float)
    np.testing.assert_allclose(cubic_convolution(v, np.tile(k, (3, 1))), v, rtol=0, atol=1e-14)
    q = 0.3 * k**2 - 2.0 * k + 1.0
    x = rng.uniform(2, 17, (1, 50))
    np.testing.assert_allclose(cubic_convolution(q[None, :], x)[0], 0.3 * x[0] ** 2 - 2.0 * x[0] + 1.0, rtol=1e-12)
    out = cubic_convolution(v, np.array([[-0.6, 19.6, 5.0]] * 3), before=0.0)
    assert np.all(out[:, 0] == 0.0) and np.all(np.isnan(out[:, 1]))


def test_noise_floor_of_exponential_noise_is_its_mean():
    """Single-look power is exponential (Goodman 1976): the mean of n samples has relative standard error 1/√n."""
    rng = np.random.default_rng(5)
    mean = 3.0e-9
    obs = rng.exponential(mean, (40, 300))
    mask = np.zeros(obs.shape, dtype=bool)
    mask[:, :200] = True
    floor = noise_floor(obs, mask)
    assert floor.source == "before surface"
    # each floor pools 21 traces × 200 samples (11 × 200 at the ends): 1/√2200 ≈ 2 %
    np.testing.assert_allclose(floor.power, mean, rtol=0.08)
    assert floor.n_samples[20] == 21 * 200 and floor.n_samples[0] == 11 * 200
    # spread in dB: 10 log10(X/m) of exponential X has MAD a about its median with
    # P(m 10^(−a/10) ≤ X ≤ m 10^(a/10)) = ½, m = ln 2 · mean (from Goodman 1976)
    a = brentq(lambda a: 2 ** -(10 ** (-a / 10)) - 2 ** -(10 ** (a / 10)) - 0.5, 0.1, 20.0)
    assert floor.spread_db == pytest.approx(1.4826 * a, rel=0.05)  # Rousseeuw & Croux 1993: σ = 1.4826 MAD
    # with a prediction, its mean is removed: sidelobes of the simulation are not noise
    pred = np.full(obs.shape, 0.5 * mean)
    assert np.median(noise_floor(obs + pred, mask, predicted=pred).power) == pytest.approx(mean, rel=0.05)


def test_noise_floor_falls_back_to_the_deepest_samples():
    rng = np.random.default_rng(6)
    obs = rng.exponential(1.0, (30, 600))
    obs[:, :50] += 1e3  # the surface echo fills the start of every window: nothing before it
    floor = noise_floor(obs, np.zeros(obs.shape, dtype=bool))
    assert floor.source == "deepest samples"
    # the deepest 60 samples of 11-21 traces: relative standard error 1/√660 … 1/√1260 = 4 … 2.8 %
    np.testing.assert_allclose(floor.power, 1.0, rtol=0.15)
    assert np.median(floor.power) == pytest.approx(1.0, rel=0.06)


def test_p_values_are_the_gamma_and_f_tails():
    """Reference: scipy.stats. Mean of K ratios of L-look power: Gamma(KL, 1/(KL)) (Goodman 1976); divided by a noise
    mean of n samples: F(2KL, 2nL) (Kay 1998, ch. 7; the cell-averaging CFAR)."""
    from scipy import stats

    r = np.array([0.5, 1.0, 3.0, 8.0])
    np.testing.assert_allclose(gamma_looks_sf(r, 1.0), np.exp(-r), rtol=1e-12)
    np.testing.assert_allclose(gamma_looks_sf(r, 4.0), stats.gamma.sf(r, a=4.0, scale=1 / 4.0), rtol=1e-10)
    np.testing.assert_allclose(ratio_p_value(r, 15, 1e9, 1.0), stats.gamma.sf(r, a=15, scale=1 / 15), rtol=1e-10)
    np.testing.assert_allclose(ratio_p_value(r, 15, 300, 2.0), stats.f.sf(r, 60, 1200), rtol=1e-8)


@pytest.mark.parametrize("looks,integration", [(1.0, 1), (1.0, 15), (4.0, 1), (4.0, 5)])
def test_false_alarm_rate_of_the_test_is_pfa_with_an_estimated_noise_floor(looks, integration):
    """Noise only, L-look Gamma power (Goodman 1976), the noise mean estimated from 64 samples per trace pooled over
    21 traces: the share of samples with p < pfa is pfa (within ×1.3) over 2e6 samples."""
    rng = np.random.default_rng(int(10 * looks + integration))
    n, m, mean = 1000, 2000, 2.5
    power = rng.gamma(looks, mean / looks, (n, m))
    mask = np.zeros((n, m), dtype=bool)
    mask[:, :64] = True
    noise = noise_floor(power, mask)
    det = detect_unexplained(power, np.zeros((n, m)), noise, pfa=1e-3, looks=looks, model_tolerance_db=3.0,
                             integration_traces=integration)  # fmt: skip
    for pfa in (1e-2, 1e-3, 1e-4):
        rate = float(np.mean(det.p_value < pfa))
        assert rate == pytest.approx(pfa, rel=0.3), (pfa, rate)
    assert det.unexplained.mean() == pytest.approx(1e-3, rel=0.3)
    assert np.array_equal(det.explained, det.detected & ~det.unexplained)


def test_clutter_within_the_tolerances_explains_an_echo_and_stronger_echoes_stand_out():
    noise = NoiseFloor(power=np.ones(1), n_samples=np.full(1, 1e9), spread_db=5.6, source="before surface")
    obs = np.ones((1, 40))
    obs[0, 10] = obs[0, 30] = 1000.0  # two 30 dB echoes
    clutter = np.zeros((1, 40))
    clutter[0, 10] = 600.0  # predicted: within the model tolerance (3 dB) of the first echo
    det = detect_unexplained(obs, clutter, noise, pfa=1e-6, looks=1.0, model_tolerance_db=3.0)
    assert det.detected[0, 10] and det.explained[0, 10] and not det.candidate[0, 10]
    assert det.candidate[0, 30] and not det.explained[0, 30]
    # single look: exp(−r) < 1e-6 needs r > 13.8: 1000 over 600 × 2 + 1 is far from it; over 1 + 20 × 2 it is not
    clutter[0, 10] = 20.0
    det = detect_unexplained(obs, clutter, noise, pfa=1e-6, looks=1.0, model_tolerance_db=3.0)
    assert det.candidate[0, 10]


def test_score_and_continuity():
    mask = np.zeros((7, 20), dtype=bool)
    mask[1:6, 10] = True  # a flat reflector on traces 1-5
    mask[3, 2] = True  # an isolated spike
    k = continuity_fraction(mask, neighbours=2, delay_half_width_samples=1)
    assert k[3, 10] == 1.0  # all four neighbours
    assert k[1, 10] == pytest.approx(2 / 3)  # neighbours 0, 2, 3: two have it
    assert k[3, 2] == 0.0
    # score = u (1 + k) / 2: isolated ≤ ½, unexplained and continuous → 1
    assert candidate_score(1.0, 0.0) == 0.5 and candidate_score(1.0, 1.0) == 1.0 and candidate_score(0.5, 1.0) == 0.5


# --------------------------------------------------------------------------- the whole comparison


@pytest.mark.parametrize("shift", [7.3, -4.6])
def test_known_delay_offset_is_recovered_within_a_quarter_sample(scene, shift):
    _, track, _, sim = scene
    result = compare(observed(sim, track, shift_samples=shift, seed=1), sim)
    off = result.offset
    assert off.global_samples == pytest.approx(shift, abs=0.25)  # issue requirement
    assert off.global_s == pytest.approx(shift * DT, abs=0.25 * DT)
    assert 0 < off.global_uncertainty_samples < 0.25
    assert off.n_traces == NTRACE and off.correlation > 0.99
    # gain on the surface echo: the invented calibration difference
    assert result.gain.gain_db == pytest.approx(GAIN_DB, abs=0.3)
    assert result.match.method == "time" and result.match.matched.all()


def test_per_trace_offset_follows_a_slow_drift(scene):
    _, track, _, sim = scene
    drift = 3.0 + 2.0 * np.sin(2 * np.pi * np.arange(NTRACE) / NTRACE)
    settings = CompareSettings(per_trace_offset=True, offset_window_traces=7)
    result = compare(observed(sim, track, shift_samples=drift, seed=2), sim, settings)
    applied = result.offset.per_trace_samples
    assert np.sqrt(np.mean((applied - drift) ** 2)) < 0.25
    assert result.offset.global_samples == pytest.approx(3.0, abs=0.6)
    assert np.isfinite(result.offset.per_trace_uncertainty_samples).all()


def test_injected_reflector_is_the_top_candidate_at_its_depth(scene):
    _, track, _, sim = scene
    depth = 40.0
    result = compare(observed(sim, track, shift_samples=7.3, seed=3, reflector_depth_m=depth), sim)
    top = result.candidates[0]
    # range resolution in ice c/(2B√ε′) = 4.2 m; one sample is 0.84 m of depth
    assert top["depth_m"] == pytest.approx(depth, abs=1.0)
    assert top["score"] > 0.9 and top["snr_db"] > 18.0
    strong = [c for c in result.candidates if c["score"] >= 0.5]
    assert len(strong) >= 20  # the hill's clutter hides the reflector on the other traces
    assert all(abs(c["depth_m"] - depth) < 2.0 for c in strong)
    # the observed sample of the echo, in the analyst's own frame, includes the 7.3-sample offset
    t = top["trace"]
    tau = sim["nadir_delay"].values[t] + 2 * depth * math.sqrt(ICE) / C
    start = sim["window_start"].values.min() - 20 * DT
    assert top["sample"] == pytest.approx((tau - start) / DT + 7.3, abs=1.5)
    assert top["lat"] == track.lat_deg[t] and top["lon"] == track.lon_deg[t]


@pytest.mark.parametrize("seed", [4, 5, 6])
def test_noise_alone_gives_no_candidate_at_the_default_pfa(scene, seed):
    _, track, _, sim = scene
    result = compare(observed(sim, track, shift_samples=7.3, seed=seed), sim)
    assert result.candidates == []
    assert int(result.dataset["unexplained"].sum()) == 0
    # the noise floor: exponential noise of median NOISE_BELOW_PEAK_DB below the simulated peak, times the gain;
    # its mean is the median / ln 2 (+1.59 dB, Goodman 1976)
    expected_db = 10 * np.log10(np.nanmax(sim["power"].values)) - NOISE_BELOW_PEAK_DB + GAIN_DB + 1.59
    assert np.median(result.noise.db) == pytest.approx(expected_db, abs=0.3)


def test_products_are_written_together(scene, tmp_path):
    dem, track, _, sim = scene
    from cluttersim.io.radargram import write_netcdf

    write_netcdf(sim, tmp_path / "run" / "radargram.nc")
    power, start = observe(sim, shift_samples=7.3, seed=7, reflector_depth_m=40.0)
    np.save(tmp_path / "obs.npy", power.astype(np.float32))
    track.to_csv(tmp_path / "obs.csv")
    result, paths = compare_to_dir(tmp_path / "obs.npy", tmp_path / "obs.csv", DT, tmp_path / "cmp",
                                   sim=tmp_path / "run" / "radargram.nc", window_start_s=float(start[0]))  # fmt: skip
    assert sorted(p.name for p in (tmp_path / "cmp").iterdir()) == sorted(
        ["comparison.nc", "candidates.csv", "candidates.geojson", "side_by_side.png", "overlay.png", "difference.png"]
    )
    import xarray as xr
    from matplotlib.image import imread

    with xr.open_dataset(paths["comparison"], engine="h5netcdf") as ds:
        assert ds["observed_power"].dims == ("trace", "sample") and ds["observed_power"].shape == (NTRACE, 384)
        assert ds["explained"].dtype == np.int8 and ds["detected"].dtype == np.int8
        assert ds["unexplained"].dtype == np.int8 and ds.attrs["pfa"] == 1e-6 and ds.attrs["warnings"] == ""
        assert ds.attrs["delay_offset_samples"] == pytest.approx(7.3, abs=0.25)
        assert ds.attrs["gain_db"] == pytest.approx(GAIN_DB, abs=0.3)
    rows = paths["candidates"].read_text().splitlines()
    assert rows[0].split(",")[:4] == ["rank", "trace", "sample", "delay_us"]
    assert len(rows) - 1 == len(result.candidates) > 0
    assert imread(paths["side_by_side"]).shape[:2] == (624, 1560)  # 13 × 5.2 in at 120 dpi
    for name in ("overlay", "difference"):
        assert imread(paths[name]).shape[:2] == (600, 1200)  # 10 × 5 in at 120 dpi


def test_side_by_side_on_given_axes_returns_them_and_marks_missing_traces(scene):
    """With ``ax`` (a pair: left, right) the figure is drawn there and the pair is returned, as
    documented; traces without data get the no-data legend entry."""
    from matplotlib.figure import Figure

    from cluttersim.plots import plot_comparison_side_by_side

    _, track, _, sim = scene
    ds = compare(observed(sim, track, shift_samples=2.0, seed=3), sim).dataset
    axes = Figure().subplots(1, 2)
    assert plot_comparison_side_by_side(ds, ax=axes) is axes
    assert "no data / unmatched trace" not in [t.get_text() for t in axes[0].get_legend().get_texts()]
    ds["observed_power"][5:9, :] = np.nan
    axes = Figure().subplots(1, 2)
    plot_comparison_side_by_side(ds, ax=axes)
    assert "no data / unmatched trace" in [t.get_text() for t in axes[0].get_legend().get_texts()]


def test_candidates_geojson_holds_the_csv_rows_at_nadir_and_at_the_clutter_source(scene, tmp_path):
    """RFC 7946: a FeatureCollection of Points at [lon, lat]; one nadir point per candidate (the CSV's row as its
    properties) and, where the simulation records the dominant facet, a second point there."""
    import csv
    import json

    dem, track, _, sim = scene
    from cluttersim.io.radargram import write_netcdf

    write_netcdf(sim, tmp_path / "run" / "radargram.nc")
    power, start = observe(sim, shift_samples=-2.2, seed=9, reflector_depth_m=40.0)
    np.save(tmp_path / "obs.npy", power.astype(np.float32))
    track.to_csv(tmp_path / "obs.csv")
    result, paths = compare_to_dir(tmp_path / "obs.npy", tmp_path / "obs.csv", DT, tmp_path / "cmp",
                                   sim=tmp_path / "run" / "radargram.nc", window_start_s=float(start[0]))  # fmt: skip
    doc = json.loads(paths["geojson"].read_text())
    rows = list(csv.DictReader(paths["candidates"].open()))
    assert doc["type"] == "FeatureCollection" and len(rows) == len(result.candidates) > 0
    nadir = [f for f in doc["features"] if f["properties"]["position"] == "nadir"]
    sources = [f for f in doc["features"] if f["properties"]["position"] == "clutter_source"]
    assert len(nadir) == len(rows) and 0 < len(sources) <= len(rows)
    for f, row in zip(nadir, rows):
        assert f["geometry"]["type"] == "Point"
        assert f["geometry"]["coordinates"] == pytest.approx([float(row["lon"]), float(row["lat"])], abs=1e-6)
        assert f["properties"]["rank"] == int(row["rank"]) and f["properties"]["trace"] == int(row["trace"])
    for f in sources:
        c = result.candidates[f["properties"]["rank"] - 1]
        assert f["geometry"]["coordinates"] == pytest.approx([c["source_lon"], c["source_lat"]])
