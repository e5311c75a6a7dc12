"""Rig files (TOML) and manifests (CSV): strict validation, command-line overrides, resolved values.

A rig file describes one apparatus and one liquid (INTERFACE.md "Rig file"), in the tables
``[liquid] [ball] [tube] [scale] [camera] [marks] [site]`` plus our ``[analysis]`` and optional
``[lens]`` (lens-distortion model from ``fallcam lens``, :mod:`tracker.lens`) tables. Every key
carries its unit in its name; ``*_u_*`` keys are standard uncertainties (k = 1). Unknown tables
and keys are errors with a "did you mean". :func:`load_rig` returns a :class:`Rig` of frozen
dataclasses whose values are *resolved*: a liquid ``model`` gives the density (and a reference
viscosity) from :mod:`physics.fluids`, a ball ``material`` the density from
:mod:`physics.materials`, an ISO 3290-1 ``grade`` the diameter uncertainty; each table records
where every value came from in ``provenance``.

Single values can be overridden from the command line or a manifest row by flat names
(:data:`OVERRIDES`, e.g. ``ball_diameter_mm``, ``temperature_c``, ``capture_fps``).

All problems with the rig file, overrides or manifest raise :class:`fallcam.errors.UsageError`
(exit code 2) with one line naming the input, the value and the expectation.
"""

from __future__ import annotations

import csv
import difflib
import math
import os
import tomllib
from collections.abc import Mapping
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

import numpy as np

from fallcam.errors import UsageError
from physics import fluids, materials
from physics.drag import DRAG_LAWS, WALL_MODELS
from physics.gravity import STANDARD_GRAVITY_M_S2, local_gravity
from tracker.lens import LensModel
from tracker.scale import PLANES, Scale

__all__ = [
    "OVERRIDES",
    "MANIFEST_COLUMNS",
    "OverrideOption",
    "Liquid",
    "Ball",
    "Tube",
    "ScaleSpec",
    "Camera",
    "Marks",
    "Site",
    "Analysis",
    "LensModel",
    "Rig",
    "ManifestRow",
    "load_rig",
    "load_manifest",
    "rig_template",
]


# --------------------------------------------------------------------------------------------
# Schema: every table and key, with type, unit, allowed range and a one-line description.
# --------------------------------------------------------------------------------------------

@dataclass(frozen=True)
class _Key:
    kind: str  # "number" | "choice" | "grade" | "point_pair" | "point_list" | "numbers" | "size"
    doc: str
    unit: str = ""
    lo: float | None = None
    hi: float | None = None
    lo_open: bool = False  # True: value must be > lo (else ≥ lo)
    choices: tuple[str, ...] = ()
    length: int = 0  # "numbers": how many


def _nums(doc: str, unit: str, length: int, lo: float | None = None, hi: float | None = None, *,
          lo_open: bool = False) -> _Key:
    return _Key("numbers", doc, unit, lo, hi, lo_open, length=length)


def _num(doc: str, unit: str, lo: float | None = None, hi: float | None = None, *,
         lo_open: bool = False) -> _Key:
    return _Key("number", doc, unit, lo, hi, lo_open)


_POS = dict(lo=0.0, lo_open=True)
_NONNEG = dict(lo=0.0)

SCHEMA: dict[str, dict[str, _Key]] = {
    "liquid": {
        "model": _Key("choice", "reference liquid model", choices=fluids.FLUID_NAMES),
        "temperature_c": _num("liquid temperature", "°C", -50.0, 200.0),
        "temperature_u_c": _num("standard uncertainty of the temperature", "K", 0.0, 50.0),
        "density_kg_m3": _num("liquid density", "kg/m³", 300.0, 20000.0),
        "density_u_kg_m3": _num("standard uncertainty of the liquid density", "kg/m³", **_NONNEG),
        "glycerol_mass_fraction": _num("glycerol mass fraction", "", 0.0, 1.0),
        "glycerol_mass_fraction_u": _num("standard uncertainty of the mass fraction", "", 0.0, 1.0),
        "reference_viscosity_pa_s": _num("known viscosity (apparatus calibration run)", "Pa·s",
                                         **_POS),
        "reference_viscosity_u_pa_s": _num("standard uncertainty of the known viscosity", "Pa·s",
                                           **_NONNEG),
    },
    "ball": {
        "diameter_mm": _num("ball diameter", "mm", 0.01, 200.0),
        "diameter_u_mm": _num("standard uncertainty of the diameter", "mm", **_NONNEG),
        "density_kg_m3": _num("ball density", "kg/m³", 100.0, 25000.0),
        "density_u_kg_m3": _num("standard uncertainty of the ball density", "kg/m³", **_NONNEG),
        "material": _Key("choice", "ball material (built-in density table)",
                         choices=tuple(materials.MATERIALS)),
        "grade": _Key("grade", "ISO 3290-1 grade (gives diameter_u_mm)",
                      choices=tuple(materials.ISO3290_GRADES)),
        "gauge_um": _num("ball gauge marked on the package (added to the nominal diameter)", "µm",
                         -100.0, 100.0),
        "mass_mg": _num("mass of one ball (gives the density with the diameter)", "mg", **_POS),
        "mass_u_mg": _num("standard uncertainty of the mass", "mg", **_NONNEG),
    },
    "tube": {
        "inner_diameter_mm": _num("tube inner diameter", "mm", **_POS),
        "inner_diameter_u_mm": _num("standard uncertainty of the inner diameter", "mm", **_NONNEG),
        "liquid_depth_mm": _num("liquid depth (end-effect checks)", "mm", **_POS),
    },
    "scale": {
        "points_px": _Key("point_pair", "two (x, y) points in the displayed frame", "px"),
        "distance_mm": _num("distance between the two points", "mm", **_POS),
        "distance_u_mm": _num("standard uncertainty of the distance", "mm", **_NONNEG),
        "plane": _Key("choice", "where the two points lie", choices=PLANES),
        "camera_distance_mm": _num("lens to the tube's front surface", "mm", **_POS),
        "camera_distance_u_mm": _num("standard uncertainty of the camera distance", "mm",
                                     **_NONNEG),
        "tube_wall_mm": _num("tube wall thickness", "mm", 0.0, 100.0),
        "wall_refractive_index": _num("refractive index of the tube wall", "", 1.0, 3.0),
        "liquid_refractive_index": _num("refractive index of the liquid", "", 1.0, 3.0),
        "ruler_offset_mm": _num("distance of the ruler plane behind the tube's front surface", "mm"),
    },
    "camera": {
        "capture_fps": _num("capture frame rate (slow motion)", "frames/s", 1.0, 100000.0),
        "readout_ms": _num("rolling-shutter readout time, top to bottom", "ms", 0.0, 1000.0),
    },
    "marks": {
        "points_px": _Key("point_list", "timing marks, (x, y) in the displayed frame", "px"),
    },
    "site": {
        "gravity_m_s2": _num("local gravity", "m/s²", **_POS),
        "latitude_deg": _num("latitude (WGS 84 normal gravity)", "°", -90.0, 90.0),
        "altitude_m": _num("altitude (free-air correction)", "m", -1000.0, 10000.0),
    },
    "analysis": {
        "wall_model": _Key("choice", "wall-factor model", choices=tuple(WALL_MODELS)),
        "drag_model": _Key("choice", "drag law", choices=tuple(DRAG_LAWS)),
        "apparatus_factor": _num("apparatus factor from a calibration run in a reference liquid", "1",
                                 0.5, 2.0),
        "apparatus_factor_u": _num("standard uncertainty of the apparatus factor", "1", **_NONNEG),
    },
    "lens": {
        "image_size_px": _Key("size", "width and height of the frame the calibration was made at",
                              "px"),
        "focal_length_px": _nums("focal lengths f_x, f_y", "px", 2, **_POS),
        "principal_point_px": _nums("principal point c_x, c_y in the displayed frame", "px", 2),
        "radial_coefficients": _nums("radial distortion coefficients k1, k2, k3", "", 3,
                                     -10.0, 10.0),
        "tangential_coefficients": _nums("tangential distortion coefficients p1, p2", "", 2,
                                         -1.0, 1.0),
    },
}

_REQUIRED = (("scale", "points_px"), ("scale", "distance_mm"))
_LENS_REQUIRED = ("image_size_px", "focal_length_px", "principal_point_px", "radial_coefficients")
_MAX_FRAME_PX = 16384


@dataclass(frozen=True)
class OverrideOption:
    """One rig value that the command line or a manifest row may override.

    Attributes
    ----------
    table, key : str
        Where the value lives in the rig file.
    type : type
        ``float`` or ``str``.
    help : str
        One-line description with unit.
    choices : tuple of str
        Allowed values of a text option (empty for numbers).
    """

    table: str
    key: str
    type: type
    help: str
    choices: tuple[str, ...] = ()


def _option(table: str, key: str) -> OverrideOption:
    spec = SCHEMA[table][key]
    unit = f" ({spec.unit})" if spec.unit else ""
    if spec.kind == "number":
        return OverrideOption(table, key, float, f"[{table}] {key}: {spec.doc}{unit}")
    return OverrideOption(table, key, str, f"[{table}] {key}: {spec.doc}", spec.choices)


#: Flat override names → rig table and key. Names are the table prefix + key, except the few
#: everyday ones that are unambiguous without it (``temperature_c``, ``capture_fps``, ...).
#: The CLI derives its ``--ball-diameter-mm``-style options from this dict; manifest columns are
#: ``clip``, ``label`` and these names.
OVERRIDES: dict[str, OverrideOption] = {
    name: _option(table, key)
    for name, (table, key) in {
        "ball_diameter_mm": ("ball", "diameter_mm"),
        "ball_diameter_u_mm": ("ball", "diameter_u_mm"),
        "ball_density_kg_m3": ("ball", "density_kg_m3"),
        "ball_density_u_kg_m3": ("ball", "density_u_kg_m3"),
        "ball_material": ("ball", "material"),
        "ball_grade": ("ball", "grade"),
        "ball_gauge_um": ("ball", "gauge_um"),
        "ball_mass_mg": ("ball", "mass_mg"),
        "ball_mass_u_mg": ("ball", "mass_u_mg"),
        "liquid_model": ("liquid", "model"),
        "temperature_c": ("liquid", "temperature_c"),
        "temperature_u_c": ("liquid", "temperature_u_c"),
        "liquid_density_kg_m3": ("liquid", "density_kg_m3"),
        "liquid_density_u_kg_m3": ("liquid", "density_u_kg_m3"),
        "glycerol_mass_fraction": ("liquid", "glycerol_mass_fraction"),
        "glycerol_mass_fraction_u": ("liquid", "glycerol_mass_fraction_u"),
        "reference_viscosity_pa_s": ("liquid", "reference_viscosity_pa_s"),
        "reference_viscosity_u_pa_s": ("liquid", "reference_viscosity_u_pa_s"),
        "tube_inner_diameter_mm": ("tube", "inner_diameter_mm"),
        "tube_inner_diameter_u_mm": ("tube", "inner_diameter_u_mm"),
        "liquid_depth_mm": ("tube", "liquid_depth_mm"),
        "scale_distance_mm": ("scale", "distance_mm"),
        "scale_distance_u_mm": ("scale", "distance_u_mm"),
        "camera_distance_mm": ("scale", "camera_distance_mm"),
        "capture_fps": ("camera", "capture_fps"),
        "readout_ms": ("camera", "readout_ms"),
        "gravity_m_s2": ("site", "gravity_m_s2"),
        "latitude_deg": ("site", "latitude_deg"),
        "altitude_m": ("site", "altitude_m"),
        "wall_model": ("analysis", "wall_model"),
        "drag_model": ("analysis", "drag_model"),
    }.items()
}

#: Columns a manifest may have: ``clip`` (required), ``label``, and every override name.
MANIFEST_COLUMNS: tuple[str, ...] = ("clip", "label", *OVERRIDES)

# Per-ball keys: when a row or the command line changes the ball's diameter, the rig file's
# values of these describe another ball and are not used.
_PER_BALL_KEYS = ("mass_mg", "mass_u_mg", "gauge_um")
# An overridden source of a value supersedes the file's explicit value of the same quantity.
_SUPERSEDES = {
    ("ball", "material"): ("density_kg_m3", "density_u_kg_m3", "mass_mg", "mass_u_mg"),
    ("ball", "grade"): ("diameter_u_mm",),
    ("ball", "mass_mg"): ("density_kg_m3", "density_u_kg_m3"),
    ("liquid", "model"): ("density_kg_m3", "density_u_kg_m3"),
    ("liquid", "glycerol_mass_fraction"): ("density_kg_m3", "density_u_kg_m3"),
}


# --------------------------------------------------------------------------------------------
# Value checks
# --------------------------------------------------------------------------------------------

def _did_you_mean(word: str, candidates: tuple[str, ...] | list[str]) -> str:
    match = difflib.get_close_matches(word, list(candidates), n=1, cutoff=0.6)
    if match:
        return f"did you mean {match[0]}?"
    return f"expected one of {', '.join(candidates)}"


def _check_number(value: Any, spec: _Key, where: str) -> float:
    unit = f" {spec.unit}" if spec.unit else ""
    if isinstance(value, bool) or not isinstance(value, (int, float)):
        raise UsageError(f"{where} = {value!r} must be a number{f' ({spec.unit})' if spec.unit else ''}")
    x = float(value)
    if not math.isfinite(x):
        raise UsageError(f"{where} = {value!r} must be a finite number")
    if spec.lo is not None and spec.hi is not None:
        if not spec.lo <= x <= spec.hi:
            raise UsageError(f"{where} = {x:g} is out of range; expected {spec.lo:g} to "
                             f"{spec.hi:g}{unit}")
    elif spec.lo is not None:
        if x < spec.lo or (spec.lo_open and x == spec.lo):
            rel = ">" if spec.lo_open else "≥"
            raise UsageError(f"{where} = {x:g} must be {rel} {spec.lo:g}{unit}")
    return x


def _check_point(value: Any, where: str) -> tuple[float, float]:
    if (isinstance(value, (list, tuple)) and len(value) == 2
            and all(isinstance(v, (int, float)) and not isinstance(v, bool) and math.isfinite(v)
                    for v in value)):
        return float(value[0]), float(value[1])
    raise UsageError(f"{where} has the point {value!r}; expected [x, y] in pixels of the displayed "
                     "frame")


def _check_value(value: Any, spec: _Key, where: str) -> Any:
    """Validate one value against its schema entry; return it in its resolved Python type."""
    if spec.kind == "number":
        return _check_number(value, spec, where)
    if spec.kind in ("choice", "grade"):
        if not isinstance(value, str):
            raise UsageError(f"{where} = {value!r} must be text; expected one of "
                             f"{', '.join(spec.choices)}")
        if spec.kind == "grade":  # "g10", "10" → "G10"
            try:
                return materials.iso3290_grade(value).grade
            except ValueError:
                pass
        if value not in spec.choices:
            raise UsageError(f"{where} = {value!r} is unknown; {_did_you_mean(value, spec.choices)}")
        return value
    if spec.kind == "point_pair":
        if not isinstance(value, (list, tuple)) or len(value) != 2:
            raise UsageError(f"{where} = {value!r} must be two points [[x1, y1], [x2, y2]] in pixels")
        return tuple(_check_point(p, where) for p in value)
    if spec.kind == "numbers":
        if not isinstance(value, (list, tuple)) or len(value) != spec.length:
            raise UsageError(f"{where} = {value!r} must be a list of {spec.length} numbers "
                             f"({spec.doc})")
        item = _Key("number", spec.doc, spec.unit, spec.lo, spec.hi, spec.lo_open)
        return tuple(_check_number(v, item, f"{where}[{i}]") for i, v in enumerate(value))
    if spec.kind == "size":
        if (not isinstance(value, (list, tuple)) or len(value) != 2
                or not all(isinstance(v, int) and not isinstance(v, bool)
                           and 8 <= v <= _MAX_FRAME_PX for v in value)):
            raise UsageError(f"{where} = {value!r} must be [width, height] in whole pixels "
                             f"(8 to {_MAX_FRAME_PX})")
        return int(value[0]), int(value[1])
    if spec.kind == "point_list":
        if not isinstance(value, (list, tuple)) or len(value) == 0:
            raise UsageError(f"{where} = {value!r} must be a list of points [[x, y], ...] in pixels")
        return tuple(_check_point(p, where) for p in value)
    raise AssertionError(f"schema kind {spec.kind!r}")  # pragma: no cover - schema is static


# --------------------------------------------------------------------------------------------
# Resolved rig
# --------------------------------------------------------------------------------------------

def _clean(value: Any) -> Any:
    """JSON-friendly copy: tuples → lists, numpy scalars → float."""
    if isinstance(value, dict):
        return {k: _clean(v) for k, v in value.items()}
    if isinstance(value, (list, tuple)):
        return [_clean(v) for v in value]
    if isinstance(value, np.floating):
        return float(value)
    return value


def _table_dict(obj: Any, names: tuple[str, ...]) -> dict:
    return _clean({name: getattr(obj, name) for name in names})


@dataclass(frozen=True)
class Liquid:
    """The liquid: density, temperature and reference values, resolved.

    Attributes
    ----------
    model : str or None
        ``"water"``, ``"glycerol-water"``, ``"glycerol"`` or None (density given directly).
    temperature_c : float or None
        °C.
    temperature_u_c : float
        u(T), K (0 when not given).
    density_kg_m3, density_u_kg_m3 : float or None
        Liquid density and u, kg/m³ (from the rig, or the model when not given).
    glycerol_mass_fraction, glycerol_mass_fraction_u : float or None
        Glycerol mass fraction and u (glycerol-water).
    model_viscosity_pa_s, model_viscosity_u_pa_s : float or None
        The model's viscosity at the temperature and its u (model + u(T) + u(w)), Pa·s: the
        reference to compare a measurement with.
    dlnmu_dT_per_K : float or None
        d ln μ / dT of the model, 1/K (for the budget's temperature term).
    reference_viscosity_pa_s, reference_viscosity_u_pa_s : float or None
        A known viscosity given in the rig: the run is an apparatus calibration.
    refractive_index : float or None
        The model's refractive index (used for the scale's refraction when not given).
    state : physics.fluids.FluidState or None
        The model's full result.
    provenance : dict of str
        Where each value came from.
    """

    model: str | None = None
    temperature_c: float | None = None
    temperature_u_c: float = 0.0
    density_kg_m3: float | None = None
    density_u_kg_m3: float | None = None
    glycerol_mass_fraction: float | None = None
    glycerol_mass_fraction_u: float | None = None
    model_viscosity_pa_s: float | None = None
    model_viscosity_u_pa_s: float | None = None
    dlnmu_dT_per_K: float | None = None
    reference_viscosity_pa_s: float | None = None
    reference_viscosity_u_pa_s: float | None = None
    refractive_index: float | None = None
    state: fluids.FluidState | None = field(default=None, repr=False)
    provenance: dict[str, str] = field(default_factory=dict)

    @property
    def is_calibration(self) -> bool:
        """True when the rig gives a known viscosity (the run calibrates the apparatus)."""
        return self.reference_viscosity_pa_s is not None

    def to_dict(self) -> dict:
        """JSON-friendly dict with the values, the model's result and the provenance."""
        out = _table_dict(self, ("model", "temperature_c", "temperature_u_c", "density_kg_m3",
                                 "density_u_kg_m3", "glycerol_mass_fraction",
                                 "glycerol_mass_fraction_u", "model_viscosity_pa_s",
                                 "model_viscosity_u_pa_s", "dlnmu_dT_per_K",
                                 "reference_viscosity_pa_s", "reference_viscosity_u_pa_s",
                                 "refractive_index"))
        out["model_state"] = None if self.state is None else self.state.to_dict()
        out["provenance"] = dict(self.provenance)
        return out


@dataclass(frozen=True)
class Ball:
    """The ball: diameter and density with uncertainties, resolved.

    Attributes
    ----------
    diameter_mm, diameter_u_mm : float or None
        Diameter (nominal + gauge when a gauge is given) and u, mm.
    density_kg_m3, density_u_kg_m3 : float or None
        Density and u, kg/m³ (given, from the mass, or from the material table).
    material, grade : str or None
        Material key and ISO 3290-1 grade, when given.
    gauge_um : float or None
        Ball gauge, µm.
    mass_mg, mass_u_mg : float or None
        Mass of the ball and u, mg.
    provenance : dict of str
        Where each value came from.
    """

    diameter_mm: float | None = None
    diameter_u_mm: float | None = None
    density_kg_m3: float | None = None
    density_u_kg_m3: float | None = None
    material: str | None = None
    grade: str | None = None
    gauge_um: float | None = None
    mass_mg: float | None = None
    mass_u_mg: float | None = None
    provenance: dict[str, str] = field(default_factory=dict)

    def to_dict(self) -> dict:
        """JSON-friendly dict with the values and the provenance."""
        out = _table_dict(self, ("diameter_mm", "diameter_u_mm", "density_kg_m3",
                                 "density_u_kg_m3", "material", "grade", "gauge_um", "mass_mg",
                                 "mass_u_mg"))
        out["provenance"] = dict(self.provenance)
        return out


@dataclass(frozen=True)
class Tube:
    """The tube. ``inner_diameter_mm`` None means no wall correction is possible.

    Attributes
    ----------
    inner_diameter_mm, inner_diameter_u_mm : float or None
        Inner diameter and u, mm.
    liquid_depth_mm : float or None
        Liquid depth, mm (end-effect checks).
    """

    inner_diameter_mm: float | None = None
    inner_diameter_u_mm: float = 0.0
    liquid_depth_mm: float | None = None

    def to_dict(self) -> dict:
        """JSON-friendly dict."""
        return _table_dict(self, ("inner_diameter_mm", "inner_diameter_u_mm", "liquid_depth_mm"))


@dataclass(frozen=True)
class ScaleSpec:
    """The ``[scale]`` table as given (resolved optics; see :class:`tracker.scale.Scale`).

    Attributes
    ----------
    points_px : tuple of two (x, y)
        The two scale points, px, displayed frame.
    distance_mm, distance_u_mm : float
        Their distance and u, mm.
    plane : str
        ``"ball-plane"``, ``"tube-front"`` or ``"in-air"``.
    camera_distance_mm, camera_distance_u_mm, tube_wall_mm, wall_refractive_index,
    liquid_refractive_index, ruler_offset_mm : float or None
        Optics inputs (None when not given).
    provenance : dict of str
        Where derived values came from (e.g. the liquid's refractive index from the model).
    """

    points_px: tuple[tuple[float, float], tuple[float, float]]
    distance_mm: float
    distance_u_mm: float = 0.0
    plane: str = "ball-plane"
    camera_distance_mm: float | None = None
    camera_distance_u_mm: float = 0.0
    tube_wall_mm: float | None = None
    wall_refractive_index: float | None = None
    liquid_refractive_index: float | None = None
    ruler_offset_mm: float | None = None
    provenance: dict[str, str] = field(default_factory=dict)

    def to_dict(self) -> dict:
        """JSON-friendly dict."""
        out = _table_dict(self, ("points_px", "distance_mm", "distance_u_mm", "plane",
                                 "camera_distance_mm", "camera_distance_u_mm", "tube_wall_mm",
                                 "wall_refractive_index", "liquid_refractive_index",
                                 "ruler_offset_mm"))
        out["provenance"] = dict(self.provenance)
        return out


@dataclass(frozen=True)
class Camera:
    """Camera facts the file may not carry.

    Attributes
    ----------
    capture_fps : float or None
        Capture frame rate of a slow-motion file, frames/s (None: the file's own timing).
    readout_ms : float or None
        Rolling-shutter readout time, ms (0: a global shutter; None: not given, so unknown).
    """

    capture_fps: float | None = None
    readout_ms: float | None = None

    def to_dict(self) -> dict:
        """JSON-friendly dict."""
        return _table_dict(self, ("capture_fps", "readout_ms"))


@dataclass(frozen=True)
class Marks:
    """Timing marks as points of the displayed frame (px); empty when the rig has none."""

    points_px: tuple[tuple[float, float], ...] = ()

    def to_dict(self) -> dict:
        """JSON-friendly dict."""
        return _table_dict(self, ("points_px",))


@dataclass(frozen=True)
class Site:
    """Where the measurement was made; ``g_m_s2`` is the resolved gravity.

    Attributes
    ----------
    gravity_m_s2, latitude_deg : float or None
        As given.
    altitude_m : float
        As given (0 by default), m.
    g_m_s2 : float
        Gravity used, m/s².
    provenance : str
        How ``g_m_s2`` was obtained.
    """

    gravity_m_s2: float | None = None
    latitude_deg: float | None = None
    altitude_m: float = 0.0
    g_m_s2: float = STANDARD_GRAVITY_M_S2
    provenance: str = "standard gravity 9.80665 m/s² (no [site] given)"

    def to_dict(self) -> dict:
        """JSON-friendly dict."""
        return _table_dict(self, ("gravity_m_s2", "latitude_deg", "altitude_m", "g_m_s2",
                                  "provenance"))


@dataclass(frozen=True)
class Analysis:
    """Model choices: wall factor and drag law (names of :mod:`physics.drag`), and an apparatus
    factor (with its standard uncertainty) from an earlier calibration run, applied to μ."""

    wall_model: str = "haberman-sayre"
    drag_model: str = "clift-grace-weber"
    apparatus_factor: float | None = None
    apparatus_factor_u: float = 0.0

    def to_dict(self) -> dict:
        """JSON-friendly dict."""
        return _table_dict(self, ("wall_model", "drag_model", "apparatus_factor", "apparatus_factor_u"))


@dataclass(frozen=True)
class Rig:
    """A validated, resolved rig file (plus overrides).

    Attributes
    ----------
    path : str
        The rig file as given.
    liquid, ball, tube, scale_spec, camera, marks, site, analysis
        The resolved tables.
    overrides : dict
        The override values that were applied, by flat name.
    warnings : list of str
        Problems the user should know about (missing uncertainties, inconsistent inputs).
    lens : tracker.lens.LensModel or None
        The ``[lens]`` table: lens-distortion model applied by the scale (None: no correction).
    """

    path: str
    liquid: Liquid
    ball: Ball
    tube: Tube
    scale_spec: ScaleSpec
    camera: Camera
    marks: Marks
    site: Site
    analysis: Analysis
    _scale: Scale = field(repr=False, compare=False)
    overrides: dict[str, Any] = field(default_factory=dict)
    warnings: list[str] = field(default_factory=list)
    lens: LensModel | None = None

    def scale(self) -> Scale:
        """The two-point scale (refraction-corrected when the points are not in the ball's plane;
        lens-corrected when the rig has a ``[lens]`` table).

        Returns
        -------
        tracker.scale.Scale
        """
        return self._scale

    def marks_z_mm(self, scale: Scale | None = None) -> np.ndarray:
        """Positions of the timing marks along the fall axis.

        A mark is crossed when the ball's image reaches the mark's image row, so the mark's
        image point is converted with the same scale as the ball (this holds for marks on the
        tube's front surface too).

        Parameters
        ----------
        scale : tracker.scale.Scale, optional
            Defaults to :meth:`scale`.

        Returns
        -------
        ndarray of shape (n_marks,)
            z of each mark, mm, positive downward (empty when the rig has no marks).
        """
        sc = self.scale() if scale is None else scale
        if not self.marks.points_px:
            return np.zeros(0)
        pts = np.asarray(self.marks.points_px, dtype=float)
        z_mm, _ = sc.to_mm(pts[:, 0], pts[:, 1])
        return np.asarray(z_mm, dtype=float)

    def expected_direction(self) -> str | None:
        """``"down"`` when the ball is denser than the liquid, ``"up"`` when lighter, else None.

        Returns
        -------
        str or None
            None when a density is unknown or both are equal.
        """
        rho_s, rho_f = self.ball.density_kg_m3, self.liquid.density_kg_m3
        if rho_s is None or rho_f is None or rho_s == rho_f:
            return None
        return "down" if rho_s > rho_f else "up"

    def gravity_m_s2(self) -> float:
        """Local gravity for the force balance, m/s² (see :attr:`Site.provenance`)."""
        return self.site.g_m_s2

    def missing_for_viscosity(self) -> list[str]:
        """What the rig lacks to infer a viscosity (empty when nothing is missing).

        Returns
        -------
        list of str
            Rig keys, e.g. ``"[ball] diameter_mm"``.
        """
        missing = []
        if self.ball.diameter_mm is None:
            missing.append("[ball] diameter_mm")
        if self.ball.density_kg_m3 is None:
            missing.append("[ball] density_kg_m3 (or material, or mass_mg)")
        if self.liquid.density_kg_m3 is None:
            missing.append("[liquid] density_kg_m3 (or model with temperature_c)")
        return missing

    def can_infer_viscosity(self) -> bool:
        """True when ball diameter, ball density and liquid density are all known."""
        return not self.missing_for_viscosity()

    def to_dict(self) -> dict:
        """JSON-friendly dict for the report and summary.json (``rig``)."""
        return {
            "path": self.path,
            "liquid": self.liquid.to_dict(),
            "ball": self.ball.to_dict(),
            "tube": self.tube.to_dict(),
            "scale": self.scale_spec.to_dict(),
            "camera": self.camera.to_dict(),
            "marks": self.marks.to_dict(),
            "site": self.site.to_dict(),
            "analysis": self.analysis.to_dict(),
            "lens": None if self.lens is None else self.lens.to_dict(),
            "overrides": _clean(dict(self.overrides)),
            "warnings": list(self.warnings),
        }


# --------------------------------------------------------------------------------------------
# Loading
# --------------------------------------------------------------------------------------------

def _read_toml(path: Path, src: str) -> dict:
    if not path.exists():
        raise UsageError(f"{src}: rig file not found", hint="create one with the template in the README")
    if path.is_dir():
        raise UsageError(f"{src}: is a directory; expected a TOML rig file")
    try:
        text = path.read_text(encoding="utf-8")
    except UnicodeDecodeError:
        raise UsageError(f"{src}: not a UTF-8 text file; expected a TOML rig file") from None
    except OSError as exc:
        raise UsageError(f"{src}: cannot be read ({exc.strerror})") from None
    try:
        return tomllib.loads(text)
    except tomllib.TOMLDecodeError as exc:
        raise UsageError(f"{src}: not valid TOML: {exc}") from None


def _validate_tables(raw: Mapping[str, Any], src: str) -> dict[str, dict[str, Any]]:
    tables: dict[str, dict[str, Any]] = {}
    for name, content in raw.items():
        if name not in SCHEMA:
            if not isinstance(content, dict):
                homes = [t for t, keys in SCHEMA.items() if name in keys]
                if homes:
                    raise UsageError(f"{src}: key {name} must be inside a table; did you mean "
                                     f"[{homes[0]}] {name}?")
            choices = list(SCHEMA)
            match = difflib.get_close_matches(name, choices, n=1, cutoff=0.6)
            hint = f"did you mean [{match[0]}]?" if match else (
                "expected tables " + ", ".join(f"[{t}]" for t in choices))
            raise UsageError(f"{src}: unknown table [{name}]; {hint}")
        if not isinstance(content, dict):
            raise UsageError(f"{src}: [{name}] must be a table, got {content!r}")
        out = {}
        for key, value in content.items():
            spec = SCHEMA[name].get(key)
            if spec is None:
                raise UsageError(f"{src}: unknown key [{name}] {key}; "
                                 f"{_did_you_mean(key, tuple(SCHEMA[name]))}")
            out[key] = _check_value(value, spec, f"{src}: [{name}] {key}")
        tables[name] = out
    return tables


def _apply_overrides(tables: dict[str, dict[str, Any]], overrides: Mapping[str, Any],
                     source: str, warnings: list[str]) -> dict[str, Any]:
    applied: dict[str, Any] = {}
    overridden: set[tuple[str, str]] = set()
    for name, value in overrides.items():
        if value is None:
            continue
        opt = OVERRIDES.get(name)
        if opt is None:
            raise UsageError(f"{source}: unknown override {name}; {_did_you_mean(name, tuple(OVERRIDES))}")
        checked = _check_value(value, SCHEMA[opt.table][opt.key], f"{source}: {name}")
        table = tables.setdefault(opt.table, {})
        table[opt.key] = checked
        applied[name] = checked
        overridden.add((opt.table, opt.key))
    for (table, key) in overridden:
        for dropped in _SUPERSEDES.get((table, key), ()):
            if (table, dropped) not in overridden:
                tables[table].pop(dropped, None)
    if ("ball", "diameter_mm") in overridden:
        stale = [k for k in _PER_BALL_KEYS
                 if k in tables.get("ball", {}) and ("ball", k) not in overridden]
        for k in stale:
            del tables["ball"][k]
        if stale:
            warnings.append(f"ball diameter overridden ({applied['ball_diameter_mm']:g} mm): the rig's "
                            f"[ball] {', '.join(stale)} describe another ball and are not used")
    return applied


def _resolve_liquid(t: dict[str, Any], src: str, warnings: list[str],
                    origin: Mapping[tuple[str, str], str]) -> Liquid:
    prov: dict[str, str] = {}

    def given(key: str) -> str:
        return origin.get(("liquid", key), "given")

    model = t.get("model")
    temp = t.get("temperature_c")
    temp_u = t.get("temperature_u_c")
    w = t.get("glycerol_mass_fraction")
    w_u = t.get("glycerol_mass_fraction_u")
    rho = t.get("density_kg_m3")
    rho_u = t.get("density_u_kg_m3")
    if w is not None and model not in ("glycerol-water", "glycerol"):
        raise UsageError(f"{src}: [liquid] glycerol_mass_fraction = {w:g} needs model = "
                         f"\"glycerol-water\" (model is {model!r})")
    if w_u is not None and w is None and model != "glycerol":
        raise UsageError(f"{src}: [liquid] glycerol_mass_fraction_u is given without "
                         "glycerol_mass_fraction")
    state = None
    if model is not None:
        if temp is None:
            raise UsageError(f"{src}: [liquid] model = \"{model}\" needs temperature_c (°C)")
        if model == "glycerol-water" and w is None:
            raise UsageError(f"{src}: [liquid] model = \"glycerol-water\" needs "
                             "glycerol_mass_fraction (0 to 1)")
        try:
            state = fluids.fluid_state(model, temp, w)
        except ValueError as exc:
            raise UsageError(f"{src}: [liquid] {exc}") from None
        if model == "glycerol":
            w = 1.0
        warnings.extend(f"[liquid] {m}" for m in state.warnings)
        if temp_u is None:
            warnings.append(f"[liquid] temperature_u_c not given: temperature uncertainty taken as "
                            f"0 K, although the viscosity changes {100 * state.dlnmu_dT_per_K:+.1f} % "
                            "per K")
    if temp_u is None:
        temp_u = 0.0
        if temp is not None:
            prov["temperature_u_c"] = "not given; taken as 0 K"
    if w is not None and w_u is None:
        w_u = 0.0
        prov["glycerol_mass_fraction_u"] = "not given; taken as 0"
    model_mu = model_mu_u = dlnmu = n = None
    if state is not None:
        where = f"{state.model} model at {state.temperature_c:g} °C"
        if model != "water":
            where += f", w = {state.glycerol_mass_fraction:.4g}"
        model_mu = state.viscosity_pa_s
        model_mu_u = state.viscosity_u_pa_s(temp_u, w_u or 0.0)
        dlnmu = state.dlnmu_dT_per_K
        n = state.refractive_index
        prov["model_viscosity_pa_s"] = f"{where}: {state.source}"
        prov["model_viscosity_u_pa_s"] = (f"{state.reference_u_note}; with u(T) = {temp_u:g} K"
                                          + (f" and u(w) = {w_u:g}" if w_u else ""))
        model_rho = state.density_kg_m3
        model_rho_u = state.density_u_kg_m3(temp_u, w_u or 0.0)
        if rho is None:
            rho, rho_u = model_rho, model_rho_u
            name = ("IAPWS-95" if model == "water" else "Volk & Kähler 2018")
            prov["density_kg_m3"] = f"density from {model} model ({name}) at {state.temperature_c:g} °C"
            prov["density_u_kg_m3"] = "model accuracy combined with u(T) and u(w)"
        else:
            prov["density_kg_m3"] = given("density_kg_m3")
            u_both = math.hypot(rho_u or 0.0, model_rho_u)
            if u_both > 0 and abs(rho - model_rho) > 3 * u_both:
                extra = (" (a glycerol-water density off by this much usually means a different "
                         "water content)") if model != "water" else ""
                warnings.append(f"[liquid] density_kg_m3 = {rho:g} differs from the {model} model's "
                                f"{model_rho:.2f} kg/m³ by more than 3 standard uncertainties{extra}")
    elif rho is not None:
        prov["density_kg_m3"] = given("density_kg_m3")
    if rho is not None and rho_u is None:
        rho_u = 0.0
        prov["density_u_kg_m3"] = "not given; taken as 0"
        warnings.append("[liquid] density_u_kg_m3 not given: liquid density uncertainty taken as 0")
    elif rho_u is not None and "density_u_kg_m3" not in prov:
        prov["density_u_kg_m3"] = given("density_u_kg_m3")
    ref_mu = t.get("reference_viscosity_pa_s")
    ref_mu_u = t.get("reference_viscosity_u_pa_s")
    if ref_mu_u is not None and ref_mu is None:
        raise UsageError(f"{src}: [liquid] reference_viscosity_u_pa_s is given without "
                         "reference_viscosity_pa_s")
    if ref_mu is not None:
        prov["reference_viscosity_pa_s"] = f"{given('reference_viscosity_pa_s')}: this run calibrates the apparatus"
        if ref_mu_u is None:
            ref_mu_u = 0.0
            prov["reference_viscosity_u_pa_s"] = "not given; taken as 0"
    return Liquid(model, temp, temp_u, rho, rho_u, w, w_u, model_mu, model_mu_u, dlnmu, ref_mu,
                  ref_mu_u, n, state, prov)


def _resolve_ball(t: dict[str, Any], src: str, warnings: list[str],
                  origin: Mapping[tuple[str, str], str]) -> Ball:
    prov: dict[str, str] = {}

    def given(key: str) -> str:
        return origin.get(("ball", key), "given")

    d = t.get("diameter_mm")
    d_u = t.get("diameter_u_mm")
    rho = t.get("density_kg_m3")
    rho_u = t.get("density_u_kg_m3")
    mat = t.get("material")
    grade = t.get("grade")
    gauge = t.get("gauge_um")
    mass = t.get("mass_mg")
    mass_u = t.get("mass_u_mg")
    if gauge is not None and grade is None:
        raise UsageError(f"{src}: [ball] gauge_um = {gauge:g} needs grade (ISO 3290-1, e.g. \"G10\")")
    if rho is not None and mass is not None:
        raise UsageError(f"{src}: [ball] density_kg_m3 and mass_mg are both given; expected one of "
                         "them")
    if mass_u is not None and mass is None:
        raise UsageError(f"{src}: [ball] mass_u_mg is given without mass_mg")
    if d is not None:
        prov["diameter_mm"] = given("diameter_mm")
        if gauge is not None:
            g = materials.iso3290_grade(grade)
            if gauge % g.gauge_interval_um != 0 or abs(gauge) > g.preferred_gauge_um:
                warnings.append(f"[ball] gauge_um = {gauge:g} is not one of the preferred {g.grade} "
                                f"gauges (multiples of {g.gauge_interval_um:g} µm within "
                                f"±{g.preferred_gauge_um:g} µm)")
            prov["diameter_mm"] = f"nominal {d:g} mm + gauge {gauge:+g} µm"
            d = d + gauge * 1e-3
        if d_u is not None:
            prov["diameter_u_mm"] = given("diameter_u_mm")
        elif grade is not None:
            d_u = materials.iso3290_diameter_u_mm(grade, gauge_known=gauge is not None)
            g = materials.iso3290_grade(grade)
            if gauge is not None:
                prov["diameter_u_mm"] = (f"ISO 3290-1 {g.grade}, gauge known: lot variation "
                                         f"V_DwL = {g.v_dwl_um:g} µm, rectangular → u = V_DwL/√12")
            else:
                prov["diameter_u_mm"] = (f"ISO 3290-1 {g.grade}, gauge not given: rectangular over "
                                         f"the preferred gauges ±{g.preferred_gauge_um:g} µm → "
                                         f"u = {1e3 * d_u:.2f} µm")
        else:
            d_u = 0.0
            prov["diameter_u_mm"] = "not given; taken as 0"
            warnings.append("[ball] diameter_u_mm not given (nor grade): diameter uncertainty "
                            "taken as 0")
    if rho is not None:
        prov["density_kg_m3"] = given("density_kg_m3")
        if rho_u is None:
            rho_u = 0.0
            prov["density_u_kg_m3"] = "not given; taken as 0"
            warnings.append("[ball] density_u_kg_m3 not given: ball density uncertainty taken as 0")
        else:
            prov["density_u_kg_m3"] = given("density_u_kg_m3")
        if mat is not None:
            m = materials.material(mat)
            if abs(rho - m.density_kg_m3) > 3 * math.hypot(rho_u, m.density_u_kg_m3):
                warnings.append(f"[ball] density_kg_m3 = {rho:g} is far from {mat} "
                                f"({m.density_kg_m3:g} ± {m.density_u_kg_m3:.0f} kg/m³): check the "
                                "material or the density")
    elif mass is not None:
        if d is None:
            raise UsageError(f"{src}: [ball] mass_mg = {mass:g} needs diameter_mm to give a density")
        mass_u = 0.0 if mass_u is None else mass_u
        rho, rho_u = materials.density_from_mass(mass, d, mass_u, d_u or 0.0)
        prov["density_kg_m3"] = f"from mass {mass:g} mg and diameter {d:g} mm"
        prov["density_u_kg_m3"] = "√[(u_m/m)² + (3 u_d/d)²] × ρ"
    elif mat is not None:
        m = materials.material(mat)
        rho, rho_u = m.density_kg_m3, m.density_u_kg_m3
        prov["density_kg_m3"] = f"material {mat}: {m.source}"
        prov["density_u_kg_m3"] = (f"rectangular over {m.range_kg_m3[0]:.0f}–{m.range_kg_m3[1]:.0f} "
                                   "kg/m³ (handbook spread, common practice)")
    elif rho_u is not None:
        raise UsageError(f"{src}: [ball] density_u_kg_m3 is given without density_kg_m3")
    return Ball(d, d_u, rho, rho_u, mat, grade, gauge, mass, mass_u, prov)


def _resolve_site(t: dict[str, Any], src: str) -> Site:
    g_given = t.get("gravity_m_s2")
    lat = t.get("latitude_deg")
    alt = t.get("altitude_m", 0.0)
    try:
        g = local_gravity(gravity_m_s2=g_given, latitude_deg=lat, altitude_m=alt)
    except ValueError as exc:
        raise UsageError(f"{src}: [site] {exc}") from None
    if g_given is not None:
        prov = f"given: {g:.6g} m/s²"
    elif lat is not None:
        prov = f"WGS 84 normal gravity at {lat:g}° latitude, {alt:g} m altitude (free-air)"
    else:
        prov = f"standard gravity {STANDARD_GRAVITY_M_S2} m/s² (no [site] given)"
    return Site(g_given, lat, alt, g, prov)


def _resolve_lens(t: dict[str, Any] | None, src: str) -> LensModel | None:
    if t is None:
        return None
    for key in _LENS_REQUIRED:
        if key not in t:
            spec = SCHEMA["lens"][key]
            raise UsageError(f"{src}: missing key [lens] {key} ({spec.doc}); copy the whole table "
                             "that `fallcam lens` prints")
    try:
        return LensModel.from_dict(t)
    except ValueError as exc:
        raise UsageError(f"{src}: [lens] {exc}") from None


def _resolve_scale(t: dict[str, Any], tube: Tube, liquid: Liquid, src: str,
                   lens: LensModel | None = None) -> tuple[ScaleSpec, Scale]:
    for table, key in _REQUIRED:
        if key not in t:
            what = SCHEMA[table][key]
            raise UsageError(f"{src}: missing key [{table}] {key} ({what.doc}, {what.unit})")
    prov: dict[str, str] = {}
    plane = t.get("plane", "ball-plane")
    n_l = t.get("liquid_refractive_index")
    if plane != "ball-plane":
        if n_l is None and liquid.refractive_index is not None:
            n_l = liquid.refractive_index
            prov["liquid_refractive_index"] = (f"from the {liquid.model} model at "
                                               f"{liquid.temperature_c:g} °C")
        needed = ["camera_distance_mm", "tube_wall_mm", "wall_refractive_index"]
        if plane == "in-air":
            needed.append("ruler_offset_mm")
        for key in needed:
            if key not in t:
                raise UsageError(f"{src}: [scale] plane = \"{plane}\" needs {key} "
                                 f"({SCHEMA['scale'][key].doc}) for the refraction correction")
        if n_l is None:
            raise UsageError(f"{src}: [scale] plane = \"{plane}\" needs liquid_refractive_index "
                             "(or a [liquid] model) for the refraction correction")
        if tube.inner_diameter_mm is None:
            raise UsageError(f"{src}: [scale] plane = \"{plane}\" needs [tube] inner_diameter_mm "
                             "for the refraction correction")
    spec = ScaleSpec(t["points_px"], t["distance_mm"], t.get("distance_u_mm", 0.0), plane,
                     t.get("camera_distance_mm"), t.get("camera_distance_u_mm", 0.0),
                     t.get("tube_wall_mm"), t.get("wall_refractive_index"), n_l,
                     t.get("ruler_offset_mm"), prov)
    optics = {}
    if plane != "ball-plane":
        optics = dict(camera_distance_mm=spec.camera_distance_mm, tube_wall_mm=spec.tube_wall_mm,
                      wall_refractive_index=spec.wall_refractive_index,
                      liquid_refractive_index=spec.liquid_refractive_index,
                      tube_inner_diameter_mm=tube.inner_diameter_mm,
                      ruler_offset_mm=spec.ruler_offset_mm,
                      camera_distance_u_mm=spec.camera_distance_u_mm)
    try:
        scale = Scale.from_points(spec.points_px[0], spec.points_px[1], spec.distance_mm,
                                  spec.distance_u_mm, plane=plane, lens=lens, **optics)
    except ValueError as exc:
        raise UsageError(f"{src}: [scale] {exc}") from None
    return spec, scale


def load_rig(path: str | os.PathLike[str], overrides: Mapping[str, Any] | None = None, *,
             overrides_source: str = "command line") -> Rig:
    """Read, validate and resolve a rig file.

    Parameters
    ----------
    path : str or path-like
        The TOML rig file.
    overrides : mapping, optional
        Flat override names (:data:`OVERRIDES`) → values; None values are skipped. An overridden
        value source supersedes the file's explicit value of the same quantity (e.g. an
        overridden ``ball_material`` replaces the file's ``density_kg_m3``); an overridden ball
        diameter drops the file's per-ball ``mass_mg`` and ``gauge_um``.
    overrides_source : str
        Names the origin of the overrides in messages (e.g. ``"runs.csv line 3"``).

    Returns
    -------
    Rig

    Raises
    ------
    fallcam.errors.UsageError
        Missing or unreadable file, TOML syntax error (with its line), unknown table or key (with
        a "did you mean"), wrong type, out-of-range value, missing required key, inconsistent
        inputs.
    """
    src = os.fspath(path)
    raw = _read_toml(Path(src), src)
    tables = _validate_tables(raw, src)
    warnings: list[str] = []
    applied = _apply_overrides(tables, overrides or {}, overrides_source, warnings)
    if "scale" not in tables:
        raise UsageError(f"{src}: missing table [scale] (points_px and distance_mm are required)")
    origin = {(OVERRIDES[name].table, OVERRIDES[name].key): f"{overrides_source} override"
              for name in applied}
    liquid = _resolve_liquid(tables.get("liquid", {}), src, warnings, origin)
    ball = _resolve_ball(tables.get("ball", {}), src, warnings, origin)
    tt = tables.get("tube", {})
    tube = Tube(tt.get("inner_diameter_mm"), tt.get("inner_diameter_u_mm", 0.0),
                tt.get("liquid_depth_mm"))
    if tube.inner_diameter_mm is None:
        warnings.append("no [tube] inner_diameter_mm: the viscosity gets no wall correction")
    elif ball.diameter_mm is not None and ball.diameter_mm >= tube.inner_diameter_mm:
        raise UsageError(f"{src}: [ball] diameter_mm = {ball.diameter_mm:g} must be smaller than "
                         f"[tube] inner_diameter_mm = {tube.inner_diameter_mm:g}")
    lens = _resolve_lens(tables.get("lens"), src)
    if lens is not None and lens.is_identity:
        warnings.append("[lens] has all distortion coefficients zero: no lens correction in effect")
    scale_spec, scale = _resolve_scale(tables["scale"], tube, liquid, src, lens)
    ct = tables.get("camera", {})
    camera = Camera(ct.get("capture_fps"), ct.get("readout_ms"))
    marks = Marks(tables.get("marks", {}).get("points_px", ()))
    site = _resolve_site(tables.get("site", {}), src)
    at = tables.get("analysis", {})
    analysis = Analysis(at.get("wall_model", "haberman-sayre"),
                        at.get("drag_model", "clift-grace-weber"),
                        at.get("apparatus_factor"), at.get("apparatus_factor_u", 0.0))
    return Rig(src, liquid, ball, tube, scale_spec, camera, marks, site, analysis, scale, applied,
               warnings, lens)


# --------------------------------------------------------------------------------------------
# Manifest
# --------------------------------------------------------------------------------------------

@dataclass(frozen=True)
class ManifestRow:
    """One clip of a manifest with the rig values it overrides.

    Attributes
    ----------
    clip : str
        The ``clip`` cell as written.
    clip_path : pathlib.Path
        The clip, resolved relative to the manifest's folder.
    label : str
        The ``label`` cell, or the clip's file stem.
    line : int
        Line number in the manifest file (the header is line 1).
    values : dict
        Override name → value for the non-empty override cells.
    """

    clip: str
    clip_path: Path
    label: str
    line: int
    values: dict[str, Any] = field(default_factory=dict)

    def overrides(self) -> dict[str, Any]:
        """The row's overrides for :func:`load_rig` (a fresh dict)."""
        return dict(self.values)

    def to_dict(self) -> dict:
        """JSON-friendly dict."""
        return {"clip": self.clip, "clip_path": str(self.clip_path), "label": self.label,
                "line": self.line, "values": dict(self.values)}


def _sniff_delimiter(header: str) -> str:
    if "," in header:
        return ","
    for delim in (";", "\t"):
        if delim in header:
            return delim
    return ","


def load_manifest(path: str | os.PathLike[str]) -> list[ManifestRow]:
    """Read a manifest CSV for ``series`` and ``batch``.

    The header row names the columns: ``clip`` (required; path relative to the manifest),
    optionally ``label`` and any override name of :data:`OVERRIDES` (INTERFACE.md lists
    ``ball_diameter_mm, ball_diameter_u_mm, ball_density_kg_m3, temperature_c, capture_fps``).
    Empty cells leave the rig's value. Comma-separated; a header without commas may use ``;``
    (then decimal commas are accepted) or tabs. Lines whose first cell starts with ``#`` are
    comments.

    Parameters
    ----------
    path : str or path-like
        The CSV file.

    Returns
    -------
    list of ManifestRow
        In file order.

    Raises
    ------
    fallcam.errors.UsageError
        Missing file, no ``clip`` column, unknown column (with "did you mean"), a bad number
        (naming line and column), an empty clip cell, repeated labels, no rows.
    """
    src = os.fspath(path)
    p = Path(src)
    if not p.exists():
        raise UsageError(f"{src}: manifest not found")
    if p.is_dir():
        raise UsageError(f"{src}: is a directory; expected a manifest CSV file")
    try:
        text = p.read_text(encoding="utf-8-sig")
    except UnicodeDecodeError:
        raise UsageError(f"{src}: not a UTF-8 text file; expected a manifest CSV file") from None
    lines = text.splitlines()
    if not lines or not lines[0].strip():
        raise UsageError(f"{src}: empty manifest; expected a header row with a clip column")
    delim = _sniff_delimiter(lines[0])
    reader = csv.reader(lines, delimiter=delim)
    header = [h.strip() for h in next(reader)]
    for col in header:
        if col not in MANIFEST_COLUMNS:
            raise UsageError(f"{src}: unknown column {col!r}; {_did_you_mean(col, MANIFEST_COLUMNS)}")
    if len(set(header)) != len(header):
        dup = next(c for c in header if header.count(c) > 1)
        raise UsageError(f"{src}: column {dup!r} appears twice")
    if "clip" not in header:
        raise UsageError(f"{src}: column 'clip' is required (columns found: {', '.join(header)})")
    rows: list[ManifestRow] = []
    seen_labels: dict[str, int] = {}
    for line_no, cells in enumerate(reader, start=2):
        if not cells or all(not c.strip() for c in cells) or cells[0].lstrip().startswith("#"):
            continue
        if len(cells) > len(header):
            raise UsageError(f"{src}: line {line_no} has {len(cells)} fields but the header has "
                             f"{len(header)}")
        cell = dict(zip(header, (c.strip() for c in cells)))
        clip = cell.get("clip", "")
        if not clip:
            raise UsageError(f"{src}: line {line_no}, column clip is empty; expected a clip path")
        values: dict[str, Any] = {}
        for col, text_value in cell.items():
            if col in ("clip", "label") or text_value == "":
                continue
            opt = OVERRIDES[col]
            where = f"{src}: line {line_no}, column {col}"
            if opt.type is float:
                try:
                    number = float(text_value.replace(",", ".") if delim == ";" else text_value)
                except ValueError:
                    raise UsageError(f"{where}: {text_value!r} is not a number") from None
                values[col] = _check_value(number, SCHEMA[opt.table][opt.key], where)
            else:
                values[col] = _check_value(text_value, SCHEMA[opt.table][opt.key], where)
        clip_path = Path(clip)
        if not clip_path.is_absolute():
            clip_path = p.parent / clip_path
        label = cell.get("label") or Path(clip).stem
        if label in seen_labels:
            raise UsageError(f"{src}: line {line_no}: label {label!r} repeats line "
                             f"{seen_labels[label]}; labels name output folders and must be unique")
        seen_labels[label] = line_no
        rows.append(ManifestRow(clip, clip_path, label, line_no, values))
    if not rows:
        raise UsageError(f"{src}: the manifest has a header but no clip rows")
    return rows


# --------------------------------------------------------------------------------------------
# Template
# --------------------------------------------------------------------------------------------

_TEMPLATE = """\
# fallcam rig file: one apparatus + one liquid. Units are in every key name; *_u_* keys are
# standard uncertainties (k = 1). Delete what you do not know: fallcam says what it then cannot do.
# Scenario: "harbour-lab" — steel balls in nearly pure glycerol, 44 mm acrylic tube, phone at 65 cm.

[liquid]
model = "glycerol-water"          # "water" | "glycerol-water" | "glycerol": density + reference viscosity
glycerol_mass_fraction = 0.985    # glycerol takes up water from the air: 0.985 = 1.5 % water
glycerol_mass_fraction_u = 0.003
temperature_c = 22.4              # measure it at the fall region, before and after
temperature_u_c = 0.1             # glycerol: ~9 % viscosity per kelvin, so this term matters
# density_kg_m3 = 1255.0          # a measured density overrides the model's
# density_u_kg_m3 = 0.5
# reference_viscosity_pa_s = 0.95 # known viscosity: turns this run into an apparatus calibration
# reference_viscosity_u_pa_s = 0.01

[ball]
diameter_mm = 2.5                 # nominal diameter
material = "steel-52100"          # density from the built-in table (or give density_kg_m3 / mass_mg)
grade = "G10"                     # ISO 3290-1: gives diameter_u_mm when not given
# gauge_um = -2.0                 # ball gauge printed on the package, if known
# density_kg_m3 = 7810.0
# density_u_kg_m3 = 20.0

[tube]
inner_diameter_mm = 44.0
inner_diameter_u_mm = 0.1
liquid_depth_mm = 420.0           # for the end-effect check

[scale]                           # two points a known distance apart, displayed frame (x, y) px
points_px = [[612.0, 140.0], [612.0, 940.0]]
distance_mm = 200.0
distance_u_mm = 0.3
plane = "tube-front"              # "ball-plane" | "tube-front" (tape marks on the tube) | "in-air" (ruler beside it)
camera_distance_mm = 650.0        # lens to the tube's front surface
camera_distance_u_mm = 5.0
tube_wall_mm = 3.0
wall_refractive_index = 1.49      # acrylic (PMMA)
# liquid_refractive_index = 1.47  # taken from the liquid model when not given
# ruler_offset_mm = 25.0          # "in-air": ruler plane behind the tube's front surface

[camera]
# capture_fps = 240.0             # only for slow-motion files whose stored rate is not the capture rate
# readout_ms = 20.0               # rolling-shutter readout, top to bottom; 0 for a global shutter;
                                  # left out: unknown, bounded by one frame in the budget

[marks]                           # optional timing marks (rubber bands), displayed frame
points_px = [[612.0, 300.0], [612.0, 780.0]]

[site]                            # g: given, or from latitude (+ altitude); default 9.80665
latitude_deg = 53.5
altitude_m = 12.0

[analysis]
wall_model = "haberman-sayre"     # "haberman-sayre" | "faxen" | "bohlin" | "francis" | "ladenburg"
drag_model = "clift-grace-weber"  # "clift-grace-weber" | "oseen" | "stokes" | "schiller-naumann" | "proudman-pearson"
# apparatus_factor = 1.012        # from a calibration run in a reference liquid (its summary's "calibration")
# apparatus_factor_u = 0.004

# [lens]                          # lens distortion, from `fallcam lens CLIP --board 9x6 --square-mm 20`
# image_size_px = [1920, 1080]    # frame size the calibration was made at (clips must match)
# focal_length_px = [1450.0, 1450.0]
# principal_point_px = [960.0, 540.0]
# radial_coefficients = [-0.12, 0.05, 0.0]     # k1, k2, k3
# tangential_coefficients = [0.0, 0.0]         # p1, p2
"""


def rig_template() -> str:
    """A commented rig file a newcomer can start from (our own scenario; it loads as it is).

    Returns
    -------
    str
        TOML text.
    """
    return _TEMPLATE
