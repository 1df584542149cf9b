"""A commented radar TOML to start from (``cluttersim radar-template``).

Every key the radar file accepts is listed with its unit, default and meaning:
the ``[radar]`` and ``[surface]`` tables active, the optional tables
(``[noise]``, ``[subsurface]``, ``[ionosphere]``, ``[antenna]``, ``[processing]``, ``[[band]]``)
commented out. Two starting points: an orbital sounder (the built-in radar's
values) and an airborne one (higher frequency and bandwidth, a shorter window).
The tests check that the template parses and names every key of every table,
so a key added to a config dataclass without a line here fails them.
"""

from __future__ import annotations

import math

#: (key, default, unit, meaning) per table; a default of None is written as a commented example.
_RADAR = [
    ("center_frequency_hz", 20e6, "Hz", "carrier (centre) frequency; wavelength c/f"),
    ("bandwidth_hz", 10e6, "Hz", "chirp bandwidth B: free-space range resolution c/(2B)"),
    ("sample_interval_s", 37.5e-9, "s", "delay step between samples (at most 1/B)"),
    ("samples", 2048, "1", "samples per trace (the recording window is samples × sample_interval_s)"),
    ("window_start_s", "auto", "s or \"auto\"", "two-way delay of sample 0, the same for all traces; \"auto\": 32 "
     "samples (at most a quarter of the window) before each trace's earliest surface echo"),
    ("transmit_power_w", 10.0, "W", "peak transmitted power Pt"),
    ("antenna_gain_dbi", 0.0, "dBi", "peak antenna gain G (the pattern of [antenna] multiplies it)"),
    ("range_window", "hann", "-", "compressed-pulse weighting: \"hann\", \"hamming\" or \"none\""),
]
_SURFACE_LAWS = "\"constant\", \"lambert\", \"cosine\", \"hagfors\", \"gaussian\""
_SURFACE_PARAMS = {  # law → (key, unit, meaning)
    "constant": [("sigma0", "1", "σ0, the same at every incidence")],
    "lambert": [("k", "1", "σ0 = k cos²θ")],
    "cosine": [("k", "1", "σ0 = k cosⁿθ"), ("n", "1", "the exponent n")],
    "hagfors": [("C", "1", "Hagfors roughness parameter (rms slope ≈ 1/√C rad)"),
                ("rho", "1", "normal-incidence Fresnel reflectivity")],
    "gaussian": [("rms_slope_deg", "deg", "rms surface slope (geometric optics)"),
                 ("rho", "1", "normal-incidence Fresnel reflectivity")],
}  # fmt: skip
_NOISE = [
    ("noise_figure_db", 3.0, "dB", "receiver noise figure F (T = 290 K); give this or noise_temperature_k"),
    ("noise_temperature_k", None, "K", "system noise temperature T (F = 1) instead of noise_figure_db",
     500.0),
    ("seed", 0, "1", "integer ≥ 0: the same seed gives the same noise"),
    ("sky_temperature_k", None, "K or \"galactic\"", "optional external (sky) noise temperature added to the "
     "receiver's; \"galactic\" for the galactic background (ITU-R P.372)", "galactic"),
]
_IONOSPHERE = [
    ("tec_el_m2", 0.0, "el/m²", "vertical total electron content of a thin layer (1 TECU = 1e16): delays and "
     "disperses every echo"),
    ("collision_frequency_hz", 0.0, "1/s", "electron collision frequency ν for absorption (0: none)"),
]
_SUBSURFACE = [
    ("depth_m", None, "m", "depth of a flat interface parallel to the surface (required)", 200.0),
    ("layer_permittivity", None, "1", "real relative permittivity ε′ of the layer above it (required)", 3.15),
    ("loss_tangent", 0.0, "1", "tan δ of that layer, 0 to 0.1"),
    ("substrate_permittivity", None, "1", "ε′ below the interface (required)", 8.0),
]
_ANTENNA = [
    ("pattern", "isotropic", "-", "\"isotropic\", \"dipole\" (half-wave) or \"gaussian\"; applied on transmit and receive"),
    ("axis", "along-track", "-", "dipole axis: \"along-track\" or \"cross-track\" (horizontal)"),
    ("beamwidth_along_deg", 30.0, "deg", "gaussian: 3 dB full beamwidth in the along-track plane"),
    ("beamwidth_across_deg", 30.0, "deg", "gaussian: 3 dB full beamwidth in the cross-track plane"),
]
_PROCESSING = [
    ("aperture", "none", "-", "along-track processing emulated: \"none\" (raw echoes), \"unfocused\" or \"focused\""),
    ("aperture_length_m", 0.0, "m", "focused: the processed synthetic aperture length L"),
    ("doppler_bandwidth_hz", 0.0, "Hz", "focused, instead of L: the processed Doppler bandwidth B_D"),
    ("platform_speed_m_s", 0.0, "m/s", "v for B_D (0: from the track's time column)"),
    ("footprint_speed_m_s", 0.0, "m/s", "the footprint's ground speed (0: v Rp/(Rp + h) from the platform speed)"),
    ("pulse_length_s", 0.0, "s", "the chirp's length τ: range-compression gain τB on signal-to-noise (0: none)"),
    ("prf_hz", 0.0, "Hz", "pulse rate: the aperture's integration gain N = PRF · L / v (0: none)"),
    ("shadowing", False, "-", "line-of-sight shadowing by the terrain (slower)"),
    ("mode", "incoherent", "-", "\"incoherent\" (power) or \"coherent\" (complex echoes: speckle, no source record)"),
    ("random_phase", True, "-", "coherent: a random phase per facet for sub-facet roughness"),
    ("seed", 0, "1", "coherent: seed of those random phases"),
    ("presum", 1, "1", "runs of N consecutive pulses of the track become one output trace"),
    ("presum_mode", "incoherent", "-", "\"incoherent\" (mean power) or \"coherent\" (mean complex echo; mode = \"coherent\")"),
]
_BAND = [
    ("name", None, "-", "letters, digits, - and _ (it names the figure files)", "low"),
    ("center_frequency_hz", None, "Hz", "this band's carrier frequency", 10e6),
    ("bandwidth_hz", None, "Hz", "this band's bandwidth (sample_interval_s must be ≤ 1/B)", 5e6),
    ("transmit_power_w", None, "W", "optional: overrides [radar]", 10.0),
    ("antenna_gain_dbi", None, "dBi", "optional: overrides [radar]", 0.0),
    ("range_window", None, "-", "optional: overrides [radar]", "hann"),
]

#: The two starting points: values that differ from the orbital (built-in) radar.
PRESETS = {
    "orbital": {
        "title": "an orbital sounder (the built-in radar: 20 MHz, 10 MHz bandwidth, 77 µs window)",
        "radar": {},
    },
    "airborne": {
        "title": "an airborne sounder (60 MHz, 15 MHz bandwidth, 20 µs window: flights a few km above the ground)",
        "radar": {"center_frequency_hz": 60e6, "bandwidth_hz": 15e6, "sample_interval_s": 20e-9, "samples": 1024,
                  "transmit_power_w": 100.0},
    },
}  # fmt: skip


def _toml_value(value) -> str:
    if isinstance(value, bool):
        return "true" if value else "false"
    if isinstance(value, str):
        return f'"{value}"'
    if isinstance(value, float):
        if value != 0 and not 1e-3 <= abs(value) < 1e4:  # engineering notation: 20e6, 37.5e-9
            exp = int(math.floor(math.log10(abs(value)) / 3) * 3)
            return f"{value / 10**exp:g}e{exp}"
        text = f"{value:g}"
        return text if any(c in text for c in ".e") else text + ".0"
    return str(value)


def _line(key, value, unit, meaning, commented: bool) -> str:
    left = f"{'# ' if commented else ''}{key} = {_toml_value(value)}"
    return f"{left:<34}# [{unit}] {meaning}"


def _table(header: str, rows, *, optional: bool, intro: str) -> list[str]:
    out = ["", f"# {intro}"]
    out.append(f"{'# ' if optional else ''}{header}")
    for row in rows:
        key, default, unit, meaning = row[:4]
        example = row[4] if len(row) > 4 else default
        note = meaning if default is not None else f"{meaning}; no default"
        if default is not None and optional:
            note += f" (default {_toml_value(default)})"
        out.append(_line(key, example, unit, note, commented=optional or default is None))
    return out


def radar_template(kind: str = "orbital") -> str:
    """The commented radar TOML for ``kind`` ("orbital" or "airborne") as text.

    Examples
    --------
    >>> import tomllib, cluttersim
    >>> text = cluttersim.radar_template("airborne")
    >>> tomllib.loads(text)["radar"]["center_frequency_hz"]
    60000000.0
    """
    if kind not in PRESETS:
        raise ValueError(f"radar template {kind!r}: expected one of {', '.join(PRESETS)}")
    from .physics.scattering import LAWS

    preset = PRESETS[kind]
    lines = [
        f"# cluttersim radar file: {preset['title']}.",
        "# Every key is listed as: key = value   # [unit] meaning. Lines starting with '#' are off;",
        "# remove the '# ' of an optional table's header and keys to use it. Use it with",
        "#   cluttersim simulate --dem DEM --track TRACK.csv --radar THIS_FILE --out RUN",
        "# Unknown tables or keys, wrong types and out-of-range values are errors naming the key.",
        "",
        "# The instrument (required table).",
        "[radar]",
    ]
    for key, default, unit, meaning in _RADAR:
        value = preset["radar"].get(key, default)
        lines.append(_line(key, value, unit, f"{meaning} (default {_toml_value(default)})", commented=False))
    lines += ["", "# The surface's backscatter law σ0(θ) (required table): law = " + _SURFACE_LAWS + ";",
              "# then the parameters of that law only (the others are errors).", "[surface]",
              _line("law", "hagfors", "-", "the scattering law (default \"hagfors\")", commented=False)]  # fmt: skip
    for law, spec in LAWS.items():
        for (key, unit, meaning), default in zip(_SURFACE_PARAMS[law], spec.defaults):
            lines.append(_line(key, default, unit, f"{law}: {meaning} (default {_toml_value(default)})",
                               commented=law != "hagfors"))  # fmt: skip
    lines += _table("[noise]", _NOISE, optional=True,
                    intro="Optional: receiver noise k T B F added to every sample (exactly one of noise_figure_db, "
                          "noise_temperature_k).")  # fmt: skip
    lines += _table("[subsurface]", _SUBSURFACE, optional=True,
                    intro="Optional: the predicted echo of a flat interface below the nadir surface (a line on the "
                          "radargram).")  # fmt: skip
    lines += _table("[ionosphere]", _IONOSPHERE, optional=True,
                    intro="Optional: a thin ionospheric layer between the antenna and the ground.")  # fmt: skip
    lines += _table("[antenna]", _ANTENNA, optional=True, intro="Optional: the antenna's gain pattern.")
    lines += _table("[processing]", _PROCESSING, optional=True,
                    intro="Optional: along-track processing, shadowing, coherent mode and presumming.")  # fmt: skip
    lines += _table("[[band]]", _BAND, optional=True,
                    intro="Optional, repeatable: several frequency bands in one run; each [[band]] overrides some "
                          "[radar] keys.")  # fmt: skip
    return "\n".join(lines) + "\n"


def template_keys() -> dict[str, set[str]]:
    """Every key the template names, per table (for the tests)."""
    from .physics.scattering import LAWS

    return {
        "radar": {r[0] for r in _RADAR},
        "surface": {"law"} | {p for spec in LAWS.values() for p in spec.params},
        "noise": {r[0] for r in _NOISE}, "subsurface": {r[0] for r in _SUBSURFACE},
        "ionosphere": {r[0] for r in _IONOSPHERE},
        "antenna": {r[0] for r in _ANTENNA}, "processing": {r[0] for r in _PROCESSING}, "band": {r[0] for r in _BAND},
    }  # fmt: skip
