"""Ball materials (density with a standard uncertainty and its source) and ISO 3290-1 ball grades.

Densities follow the project's reference sheet (physics-references.md §7). Handbook densities of
one material differ by about ±0.3–1 % between alloys and sources (common practice, no source), so
each row carries a rectangular distribution over the published spread and its standard uncertainty
u = half-width / √3 (JCGM 100, 4.3.7):

- several published values (or a published range): value = midpoint, half-width = half the range;
- a single published value: half-width 0.5 % (middle of the ±0.3–1 % band, common practice);
- a value known only from memory: half-width 1 % (upper end of the band, common practice);
- the half-width is never below 0.5 % of the value.

For better than about 0.3 %, weigh the balls: :func:`density_from_mass`.

ISO 3290-1 grades (G3 … G200) give the diameter tolerances of precision balls; see
:func:`iso3290_diameter_u_mm` for the rule that turns a grade into u(d).
"""

from __future__ import annotations

import math
from dataclasses import asdict, dataclass

from physics.drag import require_positive

__all__ = [
    "MATERIALS",
    "ISO3290_GRADES",
    "Material",
    "IsoGrade",
    "material",
    "iso3290_grade",
    "iso3290_diameter_u_mm",
    "density_from_mass",
]

_MIN_HALF_WIDTH_REL = 0.005  # ±0.5 %: floor of the rectangular half-width (common practice)
_MEMORY_HALF_WIDTH_REL = 0.01  # ±1 %: single value known from memory only (common practice)


@dataclass(frozen=True)
class Material:
    """A ball material with its density and the density's standard uncertainty.

    Attributes
    ----------
    name : str
        Our key, e.g. ``"steel-52100"``.
    description : str
        Human-readable material name.
    density_kg_m3 : float
        Density used (midpoint of the published values), kg/m³.
    density_u_kg_m3 : float
        Standard uncertainty (k = 1) of the density, kg/m³: rectangular over ``range_kg_m3``.
    range_kg_m3 : tuple of float
        Low and high end of the rectangular distribution, kg/m³.
    source : str
        Where the values come from, with the reference sheet's source tags.
    """

    name: str
    description: str
    density_kg_m3: float
    density_u_kg_m3: float
    range_kg_m3: tuple[float, float]
    source: str

    def to_dict(self) -> dict:
        """Return a JSON-friendly dict of the row."""
        out = asdict(self)
        out["range_kg_m3"] = [float(v) for v in self.range_kg_m3]
        return out


def _row(name: str, description: str, values: tuple[float, ...], source: str, *,
         from_memory_only: bool = False) -> Material:
    lo, hi = min(values), max(values)
    mid = 0.5 * (lo + hi)
    floor_rel = _MEMORY_HALF_WIDTH_REL if from_memory_only else _MIN_HALF_WIDTH_REL
    half = max(0.5 * (hi - lo), floor_rel * mid)
    return Material(name, description, mid, half / math.sqrt(3.0), (mid - half, mid + half), source)


MATERIALS: dict[str, Material] = {
    m.name: m
    for m in (
        _row("steel-52100", "AISI 52100 / 100Cr6 bearing steel", (7810.0, 7833.0),
             "published: 52100 data page 'Density 7.81 g/cm³'; published (via): ball material "
             "sheet 0.283 lb/in³ = 7833 kg/m³"),
        _row("stainless-302", "stainless steel AISI 302", (7900.0,),
             "from memory: 7900 kg/m³ (as 303/304)", from_memory_only=True),
        _row("stainless-303", "stainless steel AISI 303", (7900.0,),
             "published (via a density compilation): ASM Metals Handbook Vol. 1, 8th ed. 1961 p. 52"),
        _row("stainless-304", "stainless steel AISI 304", (7900.0, 8020.0),
             "published (via a density compilation): ASM Metals Handbook Vol. 1, 8th ed. 1961 "
             "p. 52 (7900); Bolz & Tuve, Handbook of Tables for Applied Engineering Science, "
             "2nd ed. 1973 p. 118 (8020)"),
        _row("stainless-316", "stainless steel AISI 316", (8000.0,),
             "published (via): ASM Metals Handbook 1961 p. 52"),
        _row("stainless-440c", "stainless steel AISI 440C", (7650.0, 7700.0, 7800.0),
             "published (via): ASM Metals Handbook 1961 p. 52 ('440', 7700); from memory: 440C "
             "data sheets 7650–7800"),
        _row("tungsten-carbide", "tungsten carbide (cemented WC–Co balls)", (14900.0, 15200.0),
             "published (via): Bolz & Tuve 1973 p. 183 (pure WC, 15200); from memory: WC–6 % Co "
             "balls 14900–15000"),
        _row("glass-soda-lime", "soda-lime glass", (2450.0, 2500.0, 2720.0),
             "published (via): Bolz & Tuve p. 177 (window glass 2500); Marks' Standard Handbook "
             "for Mechanical Engineers 7th ed. 6-7 (plate/crown 2450–2720)"),
        _row("glass-borosilicate", "borosilicate glass 3.3", (2230.0,),
             "from memory: ISO 3585 glass data", from_memory_only=True),
        _row("fused-silica", "fused silica", (2200.0, 2210.0),
             "published (via): Bolz & Tuve pp. 178, 187"),
        _row("ptfe", "PTFE", (2100.0, 2150.0, 2300.0),
             "published (via): Bolz & Tuve pp. 137, 152 (2100–2300; TFE 2150)"),
        _row("nylon-66", "nylon (polyamide) 6/6", (1130.0, 1150.0),
             "published (via): Bolz & Tuve p. 137"),
        _row("polypropylene", "polypropylene (rising balls)", (900.0, 905.0),
             "published (via): Bolz & Tuve pp. 137, 152"),
    )
}


def material(name: str) -> Material:
    """Look up a ball material by our key.

    Parameters
    ----------
    name : str
        One of the keys of :data:`MATERIALS`, e.g. ``"steel-52100"``.

    Returns
    -------
    Material

    Raises
    ------
    ValueError
        For an unknown name; the message lists the known names.
    """
    try:
        return MATERIALS[name]
    except KeyError:
        raise ValueError(
            f"material {name!r} is unknown; expected one of {', '.join(MATERIALS)}"
        ) from None


@dataclass(frozen=True)
class IsoGrade:
    """One ISO 3290-1 steel-ball grade (all values in µm).

    Attributes
    ----------
    grade : str
        ``"G3"`` … ``"G200"``.
    v_dws_um : float
        Diameter variation of a single ball, µm.
    t_dw_um : float
        Deviation from spherical form, µm.
    ra_um : float
        Surface roughness Ra, µm.
    v_dwl_um : float
        Lot diameter variation, µm.
    gauge_interval_um : float
        Step between ball gauges, µm.
    preferred_gauge_um : float
        Preferred gauges run from −this to +this, µm.
    """

    grade: str
    v_dws_um: float
    t_dw_um: float
    ra_um: float
    v_dwl_um: float
    gauge_interval_um: float
    preferred_gauge_um: float

    def to_dict(self) -> dict:
        """Return a JSON-friendly dict of the row."""
        return asdict(self)


# published (via two vendor pages reproducing ISO 3290-1:2014 and one reproducing ISO 3290 3rd ed.
# 2001, all identical; reference sheet §7): V_Dws, t_Dw, Ra, V_DwL, gauge interval, preferred gauges.
ISO3290_GRADES: dict[str, IsoGrade] = {
    g.grade: g
    for g in (
        IsoGrade("G3", 0.08, 0.08, 0.010, 0.13, 0.5, 5.0),
        IsoGrade("G5", 0.13, 0.13, 0.014, 0.25, 1.0, 5.0),
        IsoGrade("G10", 0.25, 0.25, 0.020, 0.5, 1.0, 9.0),
        IsoGrade("G16", 0.4, 0.4, 0.025, 0.8, 2.0, 10.0),
        IsoGrade("G20", 0.5, 0.5, 0.032, 1.0, 2.0, 10.0),
        IsoGrade("G24", 0.6, 0.6, 0.040, 1.2, 2.0, 12.0),
        IsoGrade("G28", 0.7, 0.7, 0.050, 1.4, 2.0, 12.0),
        IsoGrade("G40", 1.0, 1.0, 0.060, 2.0, 4.0, 16.0),
        IsoGrade("G60", 1.5, 1.5, 0.080, 3.0, 6.0, 18.0),
        IsoGrade("G100", 2.5, 2.5, 0.100, 5.0, 10.0, 40.0),
        IsoGrade("G200", 5.0, 5.0, 0.150, 10.0, 15.0, 60.0),
    )
}


def iso3290_grade(grade: str | int) -> IsoGrade:
    """Look up an ISO 3290-1 grade.

    Parameters
    ----------
    grade : str or int
        ``"G10"``, ``"g10"``, ``"10"`` or ``10``.

    Returns
    -------
    IsoGrade

    Raises
    ------
    ValueError
        For an unknown grade; the message lists the known grades.
    """
    key = str(grade).strip().upper()
    if not key.startswith("G"):
        key = "G" + key
    try:
        return ISO3290_GRADES[key]
    except KeyError:
        raise ValueError(
            f"ISO 3290-1 grade {grade!r} is unknown; expected one of {', '.join(ISO3290_GRADES)}"
        ) from None


def iso3290_diameter_u_mm(grade: str | int, gauge_known: bool) -> float:
    """Standard uncertainty of a ball's diameter from its ISO 3290-1 grade.

    Rule of the reference sheet §7:

    - gauge **not** known (only the nominal size): the lot's mean diameter may lie anywhere over
      the preferred-gauge range ±G, taken as rectangular → u = G/√3 (G10: ±9 µm → 5.2 µm);
    - gauge known (d = nominal + gauge, as marked on the package): the remaining spread is the
      lot diameter variation V_DwL, taken as rectangular over its full width → u = V_DwL/√12
      (the lower end of the sheet's range V_DwL/√12 … V_DwL/2; the rounding of the lot mean to
      the gauge interval is not added).

    Parameters
    ----------
    grade : str or int
        ISO 3290-1 grade, e.g. ``"G10"``.
    gauge_known : bool
        Whether the diameter already includes the ball gauge marked on the package.

    Returns
    -------
    float
        u(d) in mm (k = 1).
    """
    g = iso3290_grade(grade)
    if gauge_known:
        u_um = g.v_dwl_um / math.sqrt(12.0)
    else:
        u_um = g.preferred_gauge_um / math.sqrt(3.0)
    return u_um * 1e-3


def density_from_mass(mass_mg: float, diameter_mm: float, mass_u_mg: float = 0.0,
                      diameter_u_mm: float = 0.0) -> tuple[float, float]:
    """Density of a weighed sphere, ρ = m / (π d³/6), with u(ρ)/ρ = √[(u_m/m)² + (3 u_d/d)²].

    Parameters
    ----------
    mass_mg : float
        Mass of one ball (or the mean of several), mg. Must be > 0.
    diameter_mm : float
        Diameter, mm. Must be > 0.
    mass_u_mg, diameter_u_mm : float
        Standard uncertainties, mg and mm (≥ 0).

    Returns
    -------
    (density_kg_m3, density_u_kg_m3) : tuple of float
    """
    mass_mg = require_positive("mass_mg", mass_mg, "a mass in mg > 0")
    diameter_mm = require_positive("diameter_mm", diameter_mm, "a diameter in mm > 0")
    for name, value in (("mass_u_mg", mass_u_mg), ("diameter_u_mm", diameter_u_mm)):
        if not (math.isfinite(value) and value >= 0):
            raise ValueError(f"{name} = {value!r} must be a number ≥ 0")
    volume_m3 = math.pi * (diameter_mm * 1e-3) ** 3 / 6.0
    rho = mass_mg * 1e-6 / volume_m3
    u_rel = math.hypot(mass_u_mg / mass_mg, 3.0 * diameter_u_mm / diameter_mm)
    return rho, rho * u_rel
