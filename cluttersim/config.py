"""Simulation configuration: the radar TOML file as frozen dataclasses.

A radar TOML has two tables::

    [radar]      # RadarConfig: instrument settings
    [surface]    # SurfaceConfig: backscatter law and its parameters
    [noise]      # optional NoiseConfig (cluttersim.physics.noise): receiver noise floor k T B F
    [subsurface] # optional SubsurfaceConfig (cluttersim.physics.subsurface): predicted interface echo
    [ionosphere] # optional IonosphereConfig (cluttersim.physics.ionosphere): thin dispersive layer
    [[band]]     # optional, repeated: frequency bands (cluttersim.physics.radar.BandConfig) simulated
                 # in one run; each overrides some [radar] keys (centre frequency, bandwidth...)

Unknown tables or keys, wrong types and out-of-range values raise
:class:`~cluttersim.errors.ConfigError` naming the file, table and key.
"""

from __future__ import annotations

import dataclasses
import math
import tomllib
from dataclasses import dataclass, field
from importlib import resources
from pathlib import Path

import numpy as np

from .physics.antenna import AntennaConfig
from .physics.aperture import ProcessingConfig
from .errors import ConfigError
from .physics.ionosphere import IonosphereConfig
from .physics.noise import NoiseConfig
from .physics.radar import BAND_KEYS, BandConfig, RadarConfig, pulse_power_kernel
from .physics.scattering import LAWS
from .physics.subsurface import SubsurfaceConfig
from .validate import check_sigma0_peak


@dataclass(frozen=True)
class SurfaceConfig:
    """Backscatter law (the ``[surface]`` table): ``law`` and its parameters.

    Parameters not given take the law's defaults from
    :data:`cluttersim.physics.scattering.LAWS`.
    """

    law: str = "hagfors"
    params: dict = field(default_factory=dict)
    #: Real relative permittivity ε′ of the ground: with it the surface also reflects
    #: specularly (:mod:`cluttersim.physics.physical_optics`), Fresnel reflectivity at normal incidence.
    permittivity: float | None = None
    #: Standard deviation σh of the heights below a DEM cell (m): the specular part is weighted
    #: in power by exp(−(4π σh cos θ / λ)²). Needs ``permittivity``.
    rms_height_m: float | None = None

    def __post_init__(self):
        for name in ("permittivity", "rms_height_m"):
            value = getattr(self, name)
            if value is not None and (isinstance(value, bool) or not isinstance(value, (int, float))
                                      or not math.isfinite(value)):  # fmt: skip
                raise ConfigError(f"[surface] {name} = {value!r}: expected a finite number")
        if self.permittivity is not None and not 1.0 < self.permittivity <= 1000.0:
            raise ConfigError(f"[surface] permittivity = {self.permittivity!r}: expected a real relative permittivity "
                              "above 1 (and at most 1000)")  # fmt: skip
        if self.rms_height_m is not None:
            if not self.rms_height_m >= 0:
                raise ConfigError(f"[surface] rms_height_m = {self.rms_height_m!r}: expected a height >= 0 in metres")
            if self.permittivity is None:
                raise ConfigError("[surface] rms_height_m weights the specular reflection: expected [surface] "
                                  "permittivity as well")  # fmt: skip
        if self.law not in LAWS:
            raise ConfigError(f"[surface] law = {self.law!r}: expected one of {', '.join(LAWS)}")
        spec = LAWS[self.law]
        full = {}
        for name, default in zip(spec.params, spec.defaults):
            value = self.params.get(name, default)
            if isinstance(value, bool) or not isinstance(value, (int, float)) or not math.isfinite(value):
                raise ConfigError(f"[surface] {name} = {value!r}: expected a finite number")
            full[name] = float(value)
        for name in self.params:
            if name not in spec.params:
                raise ConfigError(
                    f"[surface] unknown key {name!r} for law {self.law!r}: expected "
                    f"{', '.join(spec.params + ('permittivity', 'rms_height_m'))}"
                )
        for name, value in full.items():
            if name == "rms_slope_deg" and not 0 < value < 90:
                raise ConfigError(f"[surface] rms_slope_deg = {value!r}: expected an angle between 0 and 90 degrees")
            elif name == "rho" and not 0 < value <= 1:
                raise ConfigError(f"[surface] rho = {value!r}: expected a reflectivity in (0, 1]")
            elif name in ("sigma0", "k", "C") and not value > 0:
                raise ConfigError(f"[surface] {name} = {value!r}: expected a positive number")
            elif name == "n" and not value >= 0:
                raise ConfigError(f"[surface] n = {value!r}: expected a non-negative exponent")
        check_sigma0_peak(self.law, full)
        object.__setattr__(self, "params", full)

    @property
    def law_code(self) -> int:
        return LAWS[self.law].code

    def kernel_params(self) -> tuple[float, float]:
        """The law's parameters as the kernel's two floats (unused ones are 0)."""
        values = [self.params[name] for name in LAWS[self.law].params] + [0.0, 0.0]
        return values[0], values[1]

    @property
    def specular(self) -> bool:
        """Whether the surface reflects specularly as well (``permittivity`` given)."""
        return self.permittivity is not None

    def reflection_coefficient(self, fallback_to_law: bool = False) -> float | None:
        """Normal-incidence amplitude reflection coefficient Γ of the ground: from
        ``permittivity``; else, with ``fallback_to_law``, Γ = −√ρ from the law's ``rho``
        (Hagfors and Gaussian: the Fresnel reflectivity); else None."""
        if self.permittivity is not None:
            from .physics.physical_optics import normal_reflection_coefficient

            return normal_reflection_coefficient(self.permittivity)
        if fallback_to_law and "rho" in self.params:
            return -math.sqrt(self.params["rho"])
        return None

    def to_dict(self) -> dict:
        extra = {k: getattr(self, k) for k in ("permittivity", "rms_height_m") if getattr(self, k) is not None}
        return {"law": self.law, **self.params, **extra}


@dataclass(frozen=True)
class SimulationConfig:
    """Everything in a radar TOML: the instrument and the surface law."""

    radar: RadarConfig = field(default_factory=RadarConfig)
    surface: SurfaceConfig = field(default_factory=SurfaceConfig)
    antenna: AntennaConfig = field(default_factory=AntennaConfig)
    processing: ProcessingConfig = field(default_factory=ProcessingConfig)  # [processing]: along-track aperture
    noise: NoiseConfig | None = None  # [noise]: receiver noise floor (cluttersim.physics.noise)
    subsurface: SubsurfaceConfig | None = None  # [subsurface]: predicted interface echo (cluttersim.physics.subsurface)
    ionosphere: IonosphereConfig | None = None  # [ionosphere]: thin dispersive layer (cluttersim.physics.ionosphere)
    bands: tuple[BandConfig, ...] = ()  # [[band]] tables: several bands in one run (empty: [radar] alone)

    def __post_init__(self):
        names = [b.name for b in self.bands]
        for name in names:
            if names.count(name) > 1:
                raise ConfigError(f"[[band]] name = {name!r} appears twice: expected distinct band names")
        for band in self.bands:
            band.radar(self.radar)  # each band must be a valid radar on the shared window
        proc = self.processing
        if proc.mode == "coherent" and not proc.random_phase and self.surface.reflection_coefficient(True) is None:
            raise ConfigError(
                f"[processing] random_phase = false treats every facet as a smooth reflector: expected [surface] "
                f"permittivity (or a law with rho; {self.surface.law!r} has none)"
            )
        if self.ionosphere is not None:
            for _, cfg in self.per_band():
                self.ionosphere.check_band(cfg.radar.center_frequency_hz, cfg.radar.bandwidth_hz)

    def pulse_kernel(self) -> tuple[np.ndarray, np.ndarray]:
        """This (single-band) configuration's compressed-pulse power kernel on the sample grid,
        peak-normalised, through the ionosphere if any (:func:`cluttersim.physics.radar.pulse_power_kernel`)."""
        r = self.radar
        return pulse_power_kernel(r.bandwidth_hz, r.sample_interval_s, r.range_window, r.center_frequency_hz,
                                  self.ionosphere)  # fmt: skip

    @property
    def band_names(self) -> list[str]:
        """Names of the ``[[band]]`` tables, in file order (empty for a single-band radar)."""
        return [b.name for b in self.bands]

    def for_band(self, name: str) -> "SimulationConfig":
        """The single-band configuration of band ``name`` (its radar settings, no ``bands``)."""
        for band in self.bands:
            if band.name == name:
                return dataclasses.replace(self, radar=band.radar(self.radar), bands=())
        raise ConfigError(f"band {name!r}: expected one of {', '.join(self.band_names) or '(none: single-band radar)'}")

    def per_band(self) -> list[tuple[str | None, "SimulationConfig"]]:
        """``[(name, single-band config)]`` for each band, or ``[(None, self)]`` without bands."""
        if not self.bands:
            return [(None, self)]
        return [(b.name, self.for_band(b.name)) for b in self.bands]

    def kernel_weighting(self) -> np.ndarray:
        """Parameters of the kernel's per-facet direction weight: antenna pattern, then aperture."""
        return np.concatenate([self.antenna.kernel_params(), self.processing.kernel_params(self.radar.wavelength_m)])

    @classmethod
    def from_toml(cls, path) -> "SimulationConfig":
        """Read and validate a radar TOML file."""
        path = Path(path)
        try:
            text = path.read_text(encoding="utf-8")
        except FileNotFoundError:
            raise ConfigError(f"{path}: radar file not found") from None
        except (OSError, UnicodeDecodeError) as exc:
            raise ConfigError(f"{path}: cannot read radar file ({exc})") from None
        try:
            data = tomllib.loads(text)
        except tomllib.TOMLDecodeError as exc:
            raise ConfigError(f"{path}: not valid TOML ({exc})") from None
        if not data:
            raise ConfigError(f"{path}: no tables: expected at least [radar] (omit --radar for the built-in radar)")
        try:
            return cls.from_dict(data)
        except ConfigError as exc:
            raise ConfigError(f"{path}: {exc}") from None

    @classmethod
    def from_dict(cls, data: dict) -> "SimulationConfig":
        """Build from a parsed TOML mapping, rejecting unknown tables and keys by name."""
        if not isinstance(data, dict):
            raise ConfigError("expected a table with [radar] and [surface]")
        for table in data:
            if table not in ("radar", "surface", "antenna", "processing", "noise", "subsurface", "ionosphere",
                             "band", "dem_error"):
                raise ConfigError(
                    f"unknown table [{table}]: expected [radar], [surface], [antenna], [processing], [noise], "
                    "[subsurface], [ionosphere], [dem_error] and [[band]]"
                )
        if "dem_error" in data:  # read by cluttersim.analysis.dem_error.DemErrorConfig.from_toml; checked here
            from .analysis.dem_error import DemErrorConfig

            DemErrorConfig.from_dict(data["dem_error"])
        radar_data = data.get("radar", {})
        surface_data = data.get("surface", {})
        if not isinstance(radar_data, dict) or not isinstance(surface_data, dict):
            raise ConfigError("[radar] and [surface] must be tables")
        surface_data = dict(surface_data)
        antenna = AntennaConfig.from_dict(data.get("antenna", {}))
        processing = ProcessingConfig.from_dict(data.get("processing", {}))
        return cls(radar=_radar_from_dict(radar_data), surface=_surface_from_dict(surface_data), antenna=antenna,
                   processing=processing, bands=_bands_from_list(data.get("band", [])), **_optional_tables(data))  # fmt: skip

    def to_dict(self) -> dict:
        return {"radar": self.radar.to_dict(), "surface": self.surface.to_dict(), "antenna": self.antenna.to_dict(),
                "processing": self.processing.to_dict(),
                **{k: v.to_dict() for k, v in (("noise", self.noise), ("subsurface", self.subsurface),
                                                 ("ionosphere", self.ionosphere)) if v is not None},
                **({"band": [b.to_dict() for b in self.bands]} if self.bands else {})}


def default_config() -> SimulationConfig:
    """The built-in radar (the demo's), read from the packaged ``default_radar.toml``."""
    with resources.as_file(resources.files("cluttersim") / "data" / "default_radar.toml") as p:
        return SimulationConfig.from_toml(p)


def _optional_tables(data: dict) -> dict:
    """The optional [noise] and [subsurface] tables as SimulationConfig keyword arguments."""
    out = {}
    if "noise" in data:
        out["noise"] = NoiseConfig.from_dict(data["noise"])
    if "subsurface" in data:
        out["subsurface"] = SubsurfaceConfig.from_dict(data["subsurface"])
    if "ionosphere" in data:
        out["ionosphere"] = IonosphereConfig.from_dict(data["ionosphere"])
    return out


def _bands_from_list(data) -> tuple[BandConfig, ...]:
    """The ``[[band]]`` tables (an array of tables) as BandConfigs."""
    if not isinstance(data, list) or not all(isinstance(b, dict) for b in data):
        raise ConfigError("[[band]] must be an array of tables, one per band")
    bands = []
    for i, table in enumerate(data, start=1):
        table = dict(table)
        name = table.pop("name", None)
        if name is None:
            raise ConfigError(f"[[band]] number {i}: missing name")
        unknown = [k for k in table if k not in BAND_KEYS]
        if unknown:
            raise ConfigError(f"[[band]] {name!r}: unknown key {unknown[0]!r}: expected name, {', '.join(BAND_KEYS)}")
        try:
            overrides = _radar_kwargs(table)
        except ConfigError as exc:
            raise ConfigError(f"[[band]] {name!r}: {str(exc).removeprefix('[radar] ')}") from None
        bands.append(BandConfig(name, overrides))
    return tuple(bands)


def _radar_from_dict(data: dict) -> RadarConfig:
    return RadarConfig(**_radar_kwargs(data))


def _radar_kwargs(data: dict) -> dict:
    """Type-checked ``[radar]`` keys (values converted: integers for samples, floats...)."""
    fields = {f.name: f for f in dataclasses.fields(RadarConfig)}
    kwargs = {}
    for key, value in data.items():
        if key not in fields:
            raise ConfigError(f"[radar] unknown key {key!r}: expected one of {', '.join(fields)}")
        if key == "samples":
            if isinstance(value, bool) or not isinstance(value, int):
                if isinstance(value, float) and value.is_integer():
                    value = int(value)
                else:
                    raise ConfigError(f"[radar] samples = {value!r}: expected an integer")
        elif key == "range_window":
            if not isinstance(value, str):
                raise ConfigError(f"[radar] range_window = {value!r}: expected a string")
        elif key == "window_start_s":
            if isinstance(value, bool) or not isinstance(value, (int, float, str)):
                raise ConfigError(f"[radar] window_start_s = {value!r}: expected \"auto\" or a delay in seconds")
            if not isinstance(value, str):
                value = float(value)
        else:
            if isinstance(value, bool) or not isinstance(value, (int, float)):
                raise ConfigError(f"[radar] {key} = {value!r}: expected a number")
            value = float(value)
        kwargs[key] = value
    return kwargs


def _surface_from_dict(data: dict) -> SurfaceConfig:
    law = data.pop("law", SurfaceConfig.law)
    if not isinstance(law, str):
        raise ConfigError(f"[surface] law = {law!r}: expected a string")
    specular = {k: data.pop(k) for k in ("permittivity", "rms_height_m") if k in data}
    return SurfaceConfig(law=law, params=data, **specular)
