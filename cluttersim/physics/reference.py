"""A plain NumPy implementation of the simulation physics, for checking and benchmarking.

:func:`reference_binned_power` evaluates every facet for every trace — no
culling, no compilation, no sub-bin grid — and lays each facet's power over
the delay bins with the *exact* trapezoidal distribution of its range
extent. It is slow (use it on small scenes) and is the oracle the compiled
kernel (:func:`cluttersim.kernels.accumulate_power`) is tested against, and
the baseline the benchmark compares it with.

Exact trapezoid in closed form: with corners c₁ < c₂ ≤ c₃ < c₄ (centre x, widths
a ≥ b: c = x ∓ (a+b)/2, x ∓ (a−b)/2) the share of a bin [k, k+1) is
Σ sᵢ [G(k+1−cᵢ) − G(k−cᵢ)] / (2ab), G(t) = max(t, 0)², s = (+, −, −, +). Each
term is three values in the second difference of the bin sequence —
(1−f)², 1+2f−2f², f² at bins m, m+1, m+2 for c = m + f — which two cumulative
sums turn back into bin values. Boxes (b ≪ a) use first differences and
point-like facets go straight into their bin.
"""

from __future__ import annotations

import numpy as np

from ..constants import SPEED_OF_LIGHT_M_S
from .scattering import LAWS


def reference_binned_power(facets, ant_m, bin0_s, dt_s: float, nbins: int, config, frames=None) -> np.ndarray:
    """Power per delay bin (ntrace, nbins), W, before the pulse convolution.

    Bin k of trace t covers two-way delays [bin0_s[t] + k dt, bin0_s[t] + (k+1) dt).
    ``facets`` is a :class:`cluttersim.facets.Facets`, ``ant_m`` the antenna
    positions relative to its origin, ``config`` a SimulationConfig, ``frames``
    the traces' along/right/down frames (needed for an antenna pattern).
    """
    radar, surface = config.radar, config.surface
    spec = LAWS[surface.law]
    params = [surface.params[name] for name in spec.params]
    pos = facets.positions_m(np.arange(len(facets)))
    normal = facets.normal.T.astype(np.float64)
    e1 = facets.e_col_m.T.astype(np.float64)
    e2 = facets.e_row_m.T.astype(np.float64)
    area = facets.area_m2.astype(np.float64)
    const = radar.radar_constant_w_m2()
    bin_m = 0.5 * SPEED_OF_LIGHT_M_S * dt_s
    out = np.zeros((len(ant_m), nbins))
    for t, a in enumerate(np.asarray(ant_m, dtype=np.float64)):
        v = pos - a
        r = np.sqrt(np.einsum("ij,ij->i", v, v))
        u = v / r[:, None]
        cos_inc = -np.einsum("ij,ij->i", u, normal)
        front = cos_inc > 0
        r, u, c = r[front], u[front], cos_inc[front]
        p = const * spec.function(c, *params) * area[front] / r**4
        if config.antenna.pattern != "isotropic":
            p *= _pattern(config.antenna, frames[t], u) ** 2
        if config.processing.aperture != "none":
            from .aperture import along_track_weight

            along = (v[front] @ frames[t][0])
            proc = config.processing
            delta = proc.kernel_params(radar.wavelength_m)[1] if proc.doppler_focused else None
            p *= along_track_weight(along, r, radar.wavelength_m, proc.aperture, proc.aperture_length_m,
                                    resolution_m=delta)  # fmt: skip
        wa = np.abs(np.einsum("ij,ij->i", u, e1[front])) / bin_m
        wb = np.abs(np.einsum("ij,ij->i", u, e2[front])) / bin_m
        x = (2.0 * r / SPEED_OF_LIGHT_M_S - bin0_s[t]) / dt_s
        out[t] = spread_exact(x, wa, wb, p, nbins)
    return out


def _pattern(antenna, frame, u):
    """One-way pattern toward unit directions u (n, 3) in a trace frame (rows along, right, down)."""
    from .antenna import DIPOLE_AXES, dipole_directivity, gaussian_beam

    if antenna.pattern == "dipole":
        return dipole_directivity(u @ frame[DIPOLE_AXES[antenna.axis]])
    along, right, down = u @ frame[0], u @ frame[1], u @ frame[2]
    return gaussian_beam(np.arctan2(along, down), np.arctan2(right, down),
                         np.radians(antenna.beamwidth_along_deg), np.radians(antenna.beamwidth_across_deg))  # fmt: skip


def spread_exact(x, wa, wb, p, nbins: int) -> np.ndarray:
    """Sum of facet trapezoids (centres x, widths wa, wb in bins; powers p) integrated over bins."""
    hi = np.maximum(wa, wb)
    lo = np.minimum(wa, wb)
    half = 0.5 * (hi + lo)
    keep = (x + half > 0) & (x - half < nbins) & (p > 0)
    x, hi, lo, p = x[keep], hi[keep], lo[keep], p[keep]
    second = np.zeros(nbins + 3)
    first = np.zeros(nbins + 2)
    direct = np.zeros(nbins)
    point = hi < 1e-9
    box = ~point & (lo < 1e-4 * hi)
    trap = ~point & ~box
    k = np.floor(x[point]).astype(np.int64)
    ok = (k >= 0) & (k < nbins)
    np.add.at(direct, k[ok], p[point][ok])
    w = p[box] / hi[box]
    for corner, sign in ((x[box] - 0.5 * hi[box], 1.0), (x[box] + 0.5 * hi[box], -1.0)):
        _first_difference_corner(first, corner, sign * w, nbins)
    w = p[trap] / (2.0 * hi[trap] * lo[trap])
    s = 0.5 * (hi[trap] + lo[trap])
    d = 0.5 * (hi[trap] - lo[trap])
    xt = x[trap]
    for corner, sign in ((xt - s, 1.0), (xt - d, -1.0), (xt + d, -1.0), (xt + s, 1.0)):
        _second_difference_corner(second, corner, sign * w, nbins)
    bins = np.cumsum(np.cumsum(second))[:nbins] + np.cumsum(first)[:nbins] + direct
    return np.maximum(bins, 0.0)


def _second_difference_corner(dd, c, w, nbins):
    """Impulses for w·[G(k+1−c) − G(k−c)], G(t) = max(t, 0)², in second differences."""
    m = np.floor(c)
    f = c - m
    m = m.astype(np.int64)
    inside = (m >= 0) & (m < nbins)
    mi, fi, wi = m[inside], f[inside], w[inside]
    np.add.at(dd, mi, wi * (1 - fi) ** 2)
    np.add.at(dd, mi + 1, wi * (1 + 2 * fi - 2 * fi**2))
    np.add.at(dd, mi + 2, wi * fi**2)
    before = m < 0  # only the linear part 2(k − c) + 1 reaches the bins
    np.add.at(dd, np.zeros(int(before.sum()), dtype=np.int64), w[before] * (1 - 2 * c[before]))
    np.add.at(dd, np.ones(int(before.sum()), dtype=np.int64), w[before] * (1 + 2 * c[before]))


def _first_difference_corner(d1, c, w, nbins):
    """Impulses for w·[H(k+1−c) − H(k−c)], H(t) = max(t, 0), in first differences."""
    m = np.floor(c)
    f = c - m
    m = m.astype(np.int64)
    inside = (m >= 0) & (m < nbins)
    np.add.at(d1, m[inside], w[inside] * (1 - f[inside]))
    np.add.at(d1, m[inside] + 1, w[inside] * f[inside])
    before = m < 0
    np.add.at(d1, np.zeros(int(before.sum()), dtype=np.int64), w[before])

