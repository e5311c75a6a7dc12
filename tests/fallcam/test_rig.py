"""Rig files, overrides and manifests: validation messages, resolution and provenance."""

import json
import math
import textwrap

import numpy as np
import pytest

from fallcam.errors import UsageError
from fallcam.rig import MANIFEST_COLUMNS, OVERRIDES, SCHEMA, load_manifest, load_rig, rig_template
from physics import fluids, materials
from physics.gravity import local_gravity

SCALE = """
[scale]
points_px = [[500.0, 100.0], [500.0, 700.0]]
distance_mm = 300.0
"""

FULL = """
[liquid]
model = "glycerol-water"
glycerol_mass_fraction = 0.99
glycerol_mass_fraction_u = 0.002
temperature_c = 21.0
temperature_u_c = 0.1

[ball]
diameter_mm = 3.0
diameter_u_mm = 0.005
material = "steel-52100"

[tube]
inner_diameter_mm = 50.0
liquid_depth_mm = 400.0
""" + SCALE + """
[marks]
points_px = [[500.0, 250.0], [500.0, 550.0]]
"""


@pytest.fixture
def rig_in(tmp_path, monkeypatch):
    """Write a rig text to ./rig.toml in a fresh folder and return its relative name."""
    monkeypatch.chdir(tmp_path)

    def write(text, name="rig.toml"):
        (tmp_path / name).write_text(textwrap.dedent(text), encoding="utf-8")
        return name

    return write


# ---- the template a newcomer starts from --------------------------------------------------------
def test_template_loads_cleanly_and_resolves(rig_in):
    rig = load_rig(rig_in(rig_template()))
    assert rig.warnings == []
    liq = rig.liquid
    assert liq.density_kg_m3 == pytest.approx(float(fluids.volk_density_kg_m3(0.985, 22.4)), rel=1e-12)
    assert liq.model_viscosity_pa_s == pytest.approx(fluids.fluid_state("glycerol-water", 22.4, 0.985).viscosity_pa_s)
    assert "Volk & Kähler 2018" in liq.provenance["density_kg_m3"] and "22.4 °C" in liq.provenance["density_kg_m3"]
    assert rig.scale().plane == "tube-front" and rig.scale().refraction_factor > 1.0
    assert rig.scale_spec.provenance["liquid_refractive_index"].startswith("from the glycerol-water model")
    assert rig.gravity_m_s2() == local_gravity(latitude_deg=53.5, altitude_m=12.0)
    assert rig.can_infer_viscosity() and rig.expected_direction() == "down"
    json.dumps(rig.to_dict(), allow_nan=False)


INTERFACE_EXAMPLE = """
[liquid]
density_kg_m3 = 1258.0
density_u_kg_m3 = 1.0
temperature_c = 21.0
temperature_u_c = 0.2

[ball]
diameter_mm = 3.0
diameter_u_mm = 0.005
density_kg_m3 = 7810.0
density_u_kg_m3 = 5.0

[tube]
inner_diameter_mm = 50.0
liquid_depth_mm = 400.0

[scale]
points_px = [[550.0, 60.0], [550.0, 660.0]]
distance_mm = 300.0
distance_u_mm = 0.5

[camera]
capture_fps = 240.0
readout_ms = 0.0

[marks]
points_px = [[640.0, 200.0], [640.0, 600.0]]

[site]
gravity_m_s2 = 9.81
"""


def test_interface_example_rig_loads(rig_in):
    # the example of INTERFACE.md "Rig file", copied verbatim (comments dropped)
    rig = load_rig(rig_in(INTERFACE_EXAMPLE))
    assert rig.warnings == []
    assert rig.scale().px_per_mm == pytest.approx(2.0)
    np.testing.assert_allclose(rig.marks_z_mm(), [70.0, 270.0])
    assert rig.gravity_m_s2() == 9.81 and rig.camera.capture_fps == 240.0
    assert rig.can_infer_viscosity() and rig.expected_direction() == "down"


def test_check_24_gravity_through_the_site_table(rig_in):
    # check value #24 (computed: WGS 84 formula, published): 45° at 500 m → 9.804655 m/s²
    rig = load_rig(rig_in(SCALE + "[site]\nlatitude_deg = 45.0\naltitude_m = 500.0\n"))
    assert rig.gravity_m_s2() == pytest.approx(9.804655, rel=1e-7)
    assert "WGS 84" in rig.site.provenance


def test_defaults_of_a_minimal_rig(rig_in):
    rig = load_rig(rig_in(SCALE))
    assert rig.gravity_m_s2() == 9.80665
    assert rig.analysis.wall_model == "haberman-sayre" and rig.analysis.drag_model == "clift-grace-weber"
    # readout not given: unknown (None), not a global shutter (0.0); analyze then bounds it
    assert rig.camera.capture_fps is None and rig.camera.readout_ms is None
    assert rig.marks_z_mm().shape == (0,)
    assert rig.expected_direction() is None
    assert not rig.can_infer_viscosity()
    assert rig.missing_for_viscosity() == ["[ball] diameter_mm", "[ball] density_kg_m3 (or material, or mass_mg)",
                                           "[liquid] density_kg_m3 (or model with temperature_c)"]
    assert "no [tube] inner_diameter_mm: the viscosity gets no wall correction" in rig.warnings


# ---- resolution --------------------------------------------------------------------------------
def test_full_rig_resolution(rig_in):
    rig = load_rig(rig_in(FULL))
    state = fluids.fluid_state("glycerol-water", 21.0, 0.99)
    assert rig.liquid.density_kg_m3 == state.density_kg_m3
    assert rig.liquid.density_u_kg_m3 == pytest.approx(state.density_u_kg_m3(0.1, 0.002))
    assert rig.liquid.model_viscosity_u_pa_s == pytest.approx(state.viscosity_u_pa_s(0.1, 0.002))
    assert rig.liquid.dlnmu_dT_per_K == state.dlnmu_dT_per_K
    assert not rig.liquid.is_calibration
    steel = materials.material("steel-52100")
    assert (rig.ball.density_kg_m3, rig.ball.density_u_kg_m3) == (steel.density_kg_m3, steel.density_u_kg_m3)
    assert rig.ball.provenance["density_kg_m3"].startswith("material steel-52100: published")
    np.testing.assert_allclose(rig.marks_z_mm(), [75.0, 225.0])
    assert rig.expected_direction() == "down"


def test_water_model_and_rising_ball(rig_in):
    rig = load_rig(rig_in(SCALE + """
        [liquid]
        model = "water"
        temperature_c = 20.0
        [ball]
        diameter_mm = 6.0
        material = "polypropylene"
    """))
    assert rig.liquid.density_kg_m3 == pytest.approx(998.207, rel=1e-6)  # check #20 (IAPWS-95)
    assert rig.expected_direction() == "up"
    assert any("temperature_u_c not given" in w for w in rig.warnings)
    assert any("diameter_u_mm not given" in w for w in rig.warnings)


def test_given_density_wins_and_a_far_model_value_warns(rig_in):
    rig = load_rig(rig_in(SCALE + """
        [liquid]
        model = "glycerol"
        temperature_c = 20.0
        density_kg_m3 = 1250.0
        density_u_kg_m3 = 0.5
    """))
    assert rig.liquid.density_kg_m3 == 1250.0 and rig.liquid.provenance["density_kg_m3"] == "given"
    assert any("differs from the glycerol model's 1260.76 kg/m³" in w for w in rig.warnings)


def test_grade_gives_diameter_u(rig_in):
    rig = load_rig(rig_in(SCALE + '[ball]\ndiameter_mm = 2.0\ngrade = "g10"\n'))
    assert rig.ball.grade == "G10"
    assert rig.ball.diameter_u_mm == pytest.approx(9e-3 / math.sqrt(3))  # sheet §7: 5.2 µm
    assert "gauge not given" in rig.ball.provenance["diameter_u_mm"]


def test_gauge_shifts_diameter_and_uses_lot_variation(rig_in):
    rig = load_rig(rig_in(SCALE + '[ball]\ndiameter_mm = 2.0\ngrade = "G10"\ngauge_um = -2.0\n'))
    assert rig.ball.diameter_mm == pytest.approx(1.998)
    assert rig.ball.diameter_u_mm == pytest.approx(0.5e-3 / math.sqrt(12))
    assert rig.warnings == ["no [tube] inner_diameter_mm: the viscosity gets no wall correction"]


def test_odd_gauge_warns(rig_in):
    rig = load_rig(rig_in(SCALE + '[ball]\ndiameter_mm = 2.0\ngrade = "G28"\ngauge_um = 3.0\n'))
    assert any("gauge_um = 3 is not one of the preferred G28 gauges" in w for w in rig.warnings)


def test_mass_gives_density(rig_in):
    # sheet §7 (computed): a 2 mm 52100 ball of 7810 kg/m³ is 32.71 mg
    rig = load_rig(rig_in(SCALE + "[ball]\ndiameter_mm = 2.0\ndiameter_u_mm = 0.001\nmass_mg = 32.71\nmass_u_mg = 0.01\n"))
    assert rig.ball.density_kg_m3 == pytest.approx(7810.0, rel=2e-4)
    assert rig.ball.density_u_kg_m3 / rig.ball.density_kg_m3 == pytest.approx(math.hypot(0.01 / 32.71, 3 * 0.001 / 2.0))


def test_reference_viscosity_makes_a_calibration_run(rig_in):
    rig = load_rig(rig_in(SCALE + "[liquid]\ndensity_kg_m3 = 1150.0\nreference_viscosity_pa_s = 0.05\n"))
    assert rig.liquid.is_calibration and rig.liquid.reference_viscosity_u_pa_s == 0.0
    assert "[liquid] density_u_kg_m3 not given: liquid density uncertainty taken as 0" in rig.warnings


def test_in_air_scale_check_27(rig_in):
    # check value #27 (derived): ruler at L + R_o → factor 0.983554
    rig = load_rig(rig_in("""
        [tube]
        inner_diameter_mm = 49.0
        [scale]
        points_px = [[500.0, 100.0], [500.0, 700.0]]
        distance_mm = 300.0
        plane = "in-air"
        camera_distance_mm = 500.0
        tube_wall_mm = 2.5
        wall_refractive_index = 1.47
        liquid_refractive_index = 1.473
        ruler_offset_mm = 27.0
    """))
    assert rig.scale().refraction_factor == pytest.approx(0.983554, rel=1e-5)


# ---- every UsageError message ------------------------------------------------------------------
BAD_RIGS = [
    ("[ball]\ndiamter_mm = 3.0\n" + SCALE, r"^rig\.toml: unknown key \[ball\] diamter_mm; did you mean diameter_mm\?$"),
    ("[ball]\nfoo = 3.0\n" + SCALE, r"^rig\.toml: unknown key \[ball\] foo; expected one of diameter_mm, diameter_u_mm, "),
    ("[balls]\ndiameter_mm = 3.0\n" + SCALE, r"^rig\.toml: unknown table \[balls\]; did you mean \[ball\]\?$"),
    ("[xyz]\na = 1\n" + SCALE, r"^rig\.toml: unknown table \[xyz\]; expected tables \[liquid\], \[ball\]"),
    ("diameter_mm = 3.0\n" + SCALE, r"^rig\.toml: key diameter_mm must be inside a table; did you mean \[ball\] diameter_mm\?$"),
    ('[ball]\ndiameter_mm = "3"\n' + SCALE, r"^rig\.toml: \[ball\] diameter_mm = '3' must be a number \(mm\)$"),
    ("[ball]\ndiameter_mm = true\n" + SCALE, r"^rig\.toml: \[ball\] diameter_mm = True must be a number \(mm\)$"),
    ("[ball]\ndiameter_mm = 0.0\n" + SCALE, r"^rig\.toml: \[ball\] diameter_mm = 0 is out of range; expected 0\.01 to 200 mm$"),
    ("[tube]\ninner_diameter_mm = -5\n" + SCALE, r"^rig\.toml: \[tube\] inner_diameter_mm = -5 must be > 0 mm$"),
    ("[tube]\ninner_diameter_mm = 50.0\ninner_diameter_u_mm = -0.1\n" + SCALE, r"^rig\.toml: \[tube\] inner_diameter_u_mm = -0\.1 must be ≥ 0 mm$"),
    ('[liquid]\nmodel = "glycerol-water"\ntemperature_c = 20.0\nglycerol_mass_fraction = 1.2\n' + SCALE,
     r"^rig\.toml: \[liquid\] glycerol_mass_fraction = 1\.2 is out of range; expected 0 to 1$"),
    ("[liquid]\ndensity_kg_m3 = 1.26\n" + SCALE, r"^rig\.toml: \[liquid\] density_kg_m3 = 1\.26 is out of range; expected 300 to 20000 kg/m³$"),
    ("[liquid]\ntemperature_c = 293.15\n" + SCALE, r"^rig\.toml: \[liquid\] temperature_c = 293\.15 is out of range; expected -50 to 200 °C$"),
    ("[camera]\ncapture_fps = 0\n" + SCALE, r"^rig\.toml: \[camera\] capture_fps = 0 is out of range; expected 1 to 100000 frames/s$"),
    ("[site]\nlatitude_deg = 95.0\n" + SCALE, r"^rig\.toml: \[site\] latitude_deg = 95 is out of range; expected -90 to 90 °$"),
    ('[ball]\nmaterial = "steel-5210"\n' + SCALE, r"^rig\.toml: \[ball\] material = 'steel-5210' is unknown; did you mean steel-52100\?$"),
    ('[ball]\ngrade = "G11"\n' + SCALE, r"^rig\.toml: \[ball\] grade = 'G11' is unknown; did you mean G1"),
    ('[analysis]\nwall_model = "haberman"\n' + SCALE, r"^rig\.toml: \[analysis\] wall_model = 'haberman' is unknown; did you mean haberman-sayre\?$"),
    ('[analysis]\ndrag_model = 3\n' + SCALE, r"^rig\.toml: \[analysis\] drag_model = 3 must be text; expected one of "),
    ("[liquid]\nmodel = \"olive-oil\"\ntemperature_c = 20.0\n" + SCALE, r"^rig\.toml: \[liquid\] model = 'olive-oil' is unknown; expected one of water, glycerol-water, glycerol$"),
    (SCALE.replace('distance_mm = 300.0\n', ''), r"^rig\.toml: missing key \[scale\] distance_mm \(distance between the two points, mm\)$"),
    (SCALE.replace('points_px = [[500.0, 100.0], [500.0, 700.0]]\n', ''), r"^rig\.toml: missing key \[scale\] points_px \(two \(x, y\) points in the displayed frame, px\)$"),
    ("[ball]\ndiameter_mm = 3.0\n", r"^rig\.toml: missing table \[scale\] \(points_px and distance_mm are required\)$"),
    (SCALE.replace("[500.0, 700.0]]", "[500.0]]"), r"^rig\.toml: \[scale\] points_px has the point \[500\.0\]; expected \[x, y\] in pixels of the displayed frame$"),
    (SCALE.replace("[[500.0, 100.0], [500.0, 700.0]]", "[[500.0, 100.0]]"), r"^rig\.toml: \[scale\] points_px = \[\[500\.0, 100\.0\]\] must be two points \[\[x1, y1\], \[x2, y2\]\] in pixels$"),
    (SCALE.replace("[500.0, 700.0]]", "[500.0, 100.0]]"), r"^rig\.toml: \[scale\] p1_px and p2_px are the same point \(500\.0, 100\.0\); expected two distinct points$"),
    ("[marks]\npoints_px = []\n" + SCALE, r"^rig\.toml: \[marks\] points_px = \[\] must be a list of points \[\[x, y\], \.\.\.\] in pixels$"),
    ("ball = 3\n" + SCALE, r"^rig\.toml: \[ball\] must be a table, got 3$"),
    ("[ball\ndiameter_mm = 3.0\n", r"^rig\.toml: not valid TOML: .*\(at line 1, column 6\)$"),
    ("[ball]\ndiameter_mm = 3.0\ndiameter_mm = 4.0\n" + SCALE, r"^rig\.toml: not valid TOML: .*line 3"),
    ('[liquid]\nmodel = "glycerol-water"\nglycerol_mass_fraction = 0.9\n' + SCALE, r"^rig\.toml: \[liquid\] model = \"glycerol-water\" needs temperature_c \(°C\)$"),
    ('[liquid]\nmodel = "glycerol-water"\ntemperature_c = 20.0\n' + SCALE, r"^rig\.toml: \[liquid\] model = \"glycerol-water\" needs glycerol_mass_fraction \(0 to 1\)$"),
    ('[liquid]\nmodel = "water"\ntemperature_c = 20.0\nglycerol_mass_fraction = 0.5\n' + SCALE, r"^rig\.toml: \[liquid\] glycerol_mass_fraction = 0\.5 needs model = \"glycerol-water\" \(model is 'water'\)$"),
    ('[liquid]\nmodel = "water"\ntemperature_c = 120.0\n' + SCALE, r"^rig\.toml: \[liquid\] temperature_c = 120 °C is outside liquid water at 0\.101325 MPa; expected 0 to 99\.97 °C$"),
    ("[liquid]\nreference_viscosity_u_pa_s = 0.01\n" + SCALE, r"^rig\.toml: \[liquid\] reference_viscosity_u_pa_s is given without reference_viscosity_pa_s$"),
    ("[ball]\ndiameter_mm = 2.0\ngauge_um = -2.0\n" + SCALE, r"^rig\.toml: \[ball\] gauge_um = -2 needs grade \(ISO 3290-1, e\.g\. \"G10\"\)$"),
    ("[ball]\ndiameter_mm = 2.0\ndensity_kg_m3 = 7800.0\nmass_mg = 32.0\n" + SCALE, r"^rig\.toml: \[ball\] density_kg_m3 and mass_mg are both given; expected one of them$"),
    ("[ball]\nmass_mg = 32.0\n" + SCALE, r"^rig\.toml: \[ball\] mass_mg = 32 needs diameter_mm to give a density$"),
    ("[ball]\ndiameter_mm = 60.0\n[tube]\ninner_diameter_mm = 50.0\n" + SCALE, r"^rig\.toml: \[ball\] diameter_mm = 60 must be smaller than \[tube\] inner_diameter_mm = 50$"),
    ("[site]\ngravity_m_s2 = 9.81\nlatitude_deg = 45.0\n" + SCALE, r"^rig\.toml: \[site\] gravity_m_s2 = 9\.81 and latitude_deg = 45\.0 are both given; expected only one of them$"),
    ("[site]\ngravity_m_s2 = 10.5\n" + SCALE, r"^rig\.toml: \[site\] gravity_m_s2 = 10\.5 is not allowed; expected a local gravity in m/s² between 9\.70 and 9\.90$"),
    (SCALE + 'plane = "tube-front"\n', r"^rig\.toml: \[scale\] plane = \"tube-front\" needs camera_distance_mm \(lens to the tube's front surface\) for the refraction correction$"),
    (SCALE + 'plane = "tube-frnt"\n', r"^rig\.toml: \[scale\] plane = 'tube-frnt' is unknown; did you mean tube-front\?$"),
    (SCALE + 'plane = "tube-front"\ncamera_distance_mm = 500.0\ntube_wall_mm = 2.5\nwall_refractive_index = 1.47\n',
     r"^rig\.toml: \[scale\] plane = \"tube-front\" needs liquid_refractive_index \(or a \[liquid\] model\) for the refraction correction$"),
    (SCALE + 'plane = "tube-front"\ncamera_distance_mm = 500.0\ntube_wall_mm = 2.5\nwall_refractive_index = 1.47\nliquid_refractive_index = 1.47\n',
     r"^rig\.toml: \[scale\] plane = \"tube-front\" needs \[tube\] inner_diameter_mm for the refraction correction$"),
    ("[tube]\ninner_diameter_mm = 50.0\n" + SCALE + 'plane = "in-air"\ncamera_distance_mm = 500.0\ntube_wall_mm = 2.5\nwall_refractive_index = 1.47\nliquid_refractive_index = 1.47\n',
     r"^rig\.toml: \[scale\] plane = \"in-air\" needs ruler_offset_mm \(distance of the ruler plane behind the tube's front surface\) for the refraction correction$"),
    (SCALE.replace("[500.0, 700.0]", "[1500.0, 150.0]"), r"^rig\.toml: \[scale\] scale points .* lie 87\.1° from vertical"),
]


@pytest.mark.parametrize("text, message", BAD_RIGS)
def test_bad_rig_message(rig_in, text, message):
    name = rig_in(text)
    with pytest.raises(UsageError, match=message) as info:
        load_rig(name)
    assert "\n" not in str(info.value)  # one line
    assert info.value.exit_code == 2


def test_missing_file_and_directory(rig_in, tmp_path):
    with pytest.raises(UsageError, match=r"^nothere\.toml: rig file not found$"):
        load_rig("nothere.toml")
    (tmp_path / "adir").mkdir()
    with pytest.raises(UsageError, match=r"^adir: is a directory; expected a TOML rig file$"):
        load_rig("adir")


def test_binary_file_is_a_usage_error(rig_in, tmp_path):
    (tmp_path / "rig.toml").write_bytes(b"\xff\xfe\x00garbage")
    with pytest.raises(UsageError, match=r"^rig\.toml: not a UTF-8 text file; expected a TOML rig file$"):
        load_rig("rig.toml")


# ---- overrides ----------------------------------------------------------------------------------
def test_overrides_apply_and_say_so(rig_in):
    rig = load_rig(rig_in(FULL), {"ball_diameter_mm": 2.0, "temperature_c": 21.3, "capture_fps": 240.0,
                                  "readout_ms": None})
    assert rig.ball.diameter_mm == 2.0 and rig.ball.provenance["diameter_mm"] == "command line override"
    assert rig.liquid.temperature_c == 21.3
    assert rig.liquid.density_kg_m3 == fluids.fluid_state("glycerol-water", 21.3, 0.99).density_kg_m3
    assert rig.camera.capture_fps == 240.0 and rig.camera.readout_ms is None
    assert rig.overrides == {"ball_diameter_mm": 2.0, "temperature_c": 21.3, "capture_fps": 240.0}


@pytest.mark.parametrize("overrides, message", [
    ({"ball_diameter": 2.0}, r"^command line: unknown override ball_diameter; did you mean ball_diameter_mm\?$"),
    ({"ball_diameter_mm": -2.0}, r"^command line: ball_diameter_mm = -2 is out of range; expected 0\.01 to 200 mm$"),
    ({"wall_model": "faxn"}, r"^command line: wall_model = 'faxn' is unknown; did you mean faxen\?$"),
])
def test_bad_override(rig_in, overrides, message):
    with pytest.raises(UsageError, match=message):
        load_rig(rig_in(FULL), overrides)


def test_override_source_is_named(rig_in):
    with pytest.raises(UsageError, match=r"^runs\.csv line 3: temperature_c = 400 is out of range"):
        load_rig(rig_in(FULL), {"temperature_c": 400.0}, overrides_source="runs.csv line 3")


def test_material_override_supersedes_file_density(rig_in):
    text = SCALE + "[ball]\ndiameter_mm = 3.0\ndensity_kg_m3 = 7800.0\ndensity_u_kg_m3 = 5.0\n"
    rig = load_rig(rig_in(text), {"ball_material": "tungsten-carbide"})
    assert rig.ball.density_kg_m3 == materials.material("tungsten-carbide").density_kg_m3


def test_diameter_override_drops_per_ball_mass(rig_in):
    text = SCALE + '[ball]\ndiameter_mm = 2.0\nmass_mg = 32.71\nmaterial = "steel-52100"\n'
    rig = load_rig(rig_in(text), {"ball_diameter_mm": 3.0})
    assert rig.ball.mass_mg is None
    assert rig.ball.density_kg_m3 == materials.material("steel-52100").density_kg_m3
    assert any("[ball] mass_mg describe another ball" in w for w in rig.warnings)


def test_every_override_points_at_a_schema_key():
    for name, opt in OVERRIDES.items():
        assert opt.key in SCHEMA[opt.table], name
        assert opt.type in (float, str)
    # INTERFACE.md manifest columns
    for col in ("clip", "ball_diameter_mm", "ball_diameter_u_mm", "ball_density_kg_m3", "temperature_c", "capture_fps", "label"):
        assert col in MANIFEST_COLUMNS


# ---- manifest -----------------------------------------------------------------------------------
def _manifest(tmp_path, text, name="runs.csv"):
    path = tmp_path / name
    path.write_text(textwrap.dedent(text).lstrip("\n"), encoding="utf-8")
    return path


def test_manifest_parsing(tmp_path, rig_in):
    (tmp_path / "clips").mkdir()
    path = _manifest(tmp_path, """
        clip,ball_diameter_mm,ball_density_kg_m3,temperature_c,capture_fps,label
        clips/a.mp4,2.0,,21.0,,small-1
        # a comment line
        clips/b.mp4,3.0,7810,21.2,240,

        /abs/c.mov,,,,,
    """)
    rows = load_manifest(path)
    assert [r.label for r in rows] == ["small-1", "b", "c"]
    assert rows[0].clip_path == tmp_path / "clips" / "a.mp4"
    assert str(rows[2].clip_path) == "/abs/c.mov"
    assert rows[0].overrides() == {"ball_diameter_mm": 2.0, "temperature_c": 21.0}
    assert rows[1].overrides() == {"ball_diameter_mm": 3.0, "ball_density_kg_m3": 7810.0, "temperature_c": 21.2, "capture_fps": 240.0}
    assert rows[1].line == 4 and rows[2].overrides() == {}
    rig = load_rig(rig_in(FULL), rows[1].overrides())
    assert rig.ball.diameter_mm == 3.0 and rig.ball.density_kg_m3 == 7810.0 and rig.camera.capture_fps == 240.0
    json.dumps([r.to_dict() for r in rows])


def test_manifest_semicolon_with_decimal_commas(tmp_path):
    path = _manifest(tmp_path, "clip;ball_diameter_mm;ball_material\nx.mp4;2,5;ptfe\n")
    row = load_manifest(path)[0]
    assert row.overrides() == {"ball_diameter_mm": 2.5, "ball_material": "ptfe"}


@pytest.mark.parametrize("text, message", [
    ("clip,ball_diamter_mm\na.mp4,2\n", r"runs\.csv: unknown column 'ball_diamter_mm'; did you mean ball_diameter_mm\?$"),
    ("clip,colour\na.mp4,red\n", r"runs\.csv: unknown column 'colour'; expected one of clip, label, ball_diameter_mm"),
    ("label,ball_diameter_mm\na,2\n", r"runs\.csv: column 'clip' is required \(columns found: label, ball_diameter_mm\)$"),
    ("clip,clip\na.mp4,b.mp4\n", r"runs\.csv: column 'clip' appears twice$"),
    ("clip,ball_diameter_mm\na.mp4,2\nb.mp4,two\n", r"runs\.csv: line 3, column ball_diameter_mm: 'two' is not a number$"),
    ("clip,ball_diameter_mm\na.mp4,-2\n", r"runs\.csv: line 2, column ball_diameter_mm = -2 is out of range; expected 0\.01 to 200 mm$"),
    ("clip,ball_material\na.mp4,stel-52100\n", r"runs\.csv: line 2, column ball_material = 'stel-52100' is unknown; did you mean steel-52100\?$"),
    ("clip,label\na.mp4,x\n,y\n", r"runs\.csv: line 3, column clip is empty; expected a clip path$"),
    ("clip,label\na.mp4,x\nb.mp4,x\n", r"runs\.csv: line 3: label 'x' repeats line 2; labels name output folders and must be unique$"),
    ("clip,label\na.mp4,x,extra\n", r"runs\.csv: line 2 has 3 fields but the header has 2$"),
    ("clip,label\n", r"runs\.csv: the manifest has a header but no clip rows$"),
    ("", r"runs\.csv: empty manifest; expected a header row with a clip column$"),
])
def test_bad_manifest_message(tmp_path, text, message):
    path = _manifest(tmp_path, text)
    with pytest.raises(UsageError, match=message):
        load_manifest(path)


def test_missing_manifest(tmp_path):
    with pytest.raises(UsageError, match=r"nothere\.csv: manifest not found$"):
        load_manifest(tmp_path / "nothere.csv")


def test_apparatus_factor_keys(tmp_path):
    from fallcam.errors import UsageError
    from fallcam.rig import load_rig, rig_template

    text = rig_template().replace("# apparatus_factor = 1.012", "apparatus_factor = 1.012")
    text = text.replace("# apparatus_factor_u = 0.004", "apparatus_factor_u = 0.004")
    good = tmp_path / "cal.toml"
    good.write_text(text, encoding="utf-8")
    rig = load_rig(good)
    assert (rig.analysis.apparatus_factor, rig.analysis.apparatus_factor_u) == (1.012, 0.004)
    bad = tmp_path / "bad.toml"
    bad.write_text(text.replace("apparatus_factor = 1.012", "apparatus_factor = -1.0"), encoding="utf-8")
    with pytest.raises(UsageError, match=r"\[analysis\] apparatus_factor"):
        load_rig(bad)


# ---- [lens] ------------------------------------------------------------------------------------
LENS = """
[lens]
image_size_px = [1920, 1080]
focal_length_px = [1450.0, 1450.0]
principal_point_px = [960.0, 540.0]
radial_coefficients = [-0.12, 0.05, 0.0]
tangential_coefficients = [0.0, 0.0]
"""

BAD_LENS = [
    (LENS.replace("focal_length_px", "focal_lenght_px"),
     r"^rig\.toml: unknown key \[lens\] focal_lenght_px; did you mean focal_length_px\?$"),
    (LENS.replace("[lens]", "[lense]"), r"^rig\.toml: unknown table \[lense\]; did you mean \[lens\]\?$"),
    (LENS.replace("[1920, 1080]", "[1920.0, 1080]"),
     r"^rig\.toml: \[lens\] image_size_px = \[1920\.0, 1080\] must be \[width, height\] in whole pixels \(8 to 16384\)$"),
    (LENS.replace("[1920, 1080]", "[1920]"),
     r"^rig\.toml: \[lens\] image_size_px = \[1920\] must be \[width, height\] in whole pixels"),
    (LENS.replace("[1450.0, 1450.0]", "[1450.0, -1.0]"),
     r"^rig\.toml: \[lens\] focal_length_px\[1\] = -1 must be > 0 px$"),
    (LENS.replace("[1450.0, 1450.0]", "1450.0"),
     r"^rig\.toml: \[lens\] focal_length_px = 1450\.0 must be a list of 2 numbers \(focal lengths f_x, f_y\)$"),
    (LENS.replace("[-0.12, 0.05, 0.0]", "[-0.12, 0.05]"),
     r"^rig\.toml: \[lens\] radial_coefficients = \[-0\.12, 0\.05\] must be a list of 3 numbers \(radial distortion coefficients k1, k2, k3\)$"),
    (LENS.replace("[-0.12, 0.05, 0.0]", '[-0.12, "x", 0.0]'),
     r"^rig\.toml: \[lens\] radial_coefficients\[1\] = 'x' must be a number$"),
    (LENS.replace("[-0.12, 0.05, 0.0]", "[-0.12, 0.05, 50.0]"),
     r"^rig\.toml: \[lens\] radial_coefficients\[2\] = 50 is out of range; expected -10 to 10$"),
    (LENS.replace("[-0.12, 0.05, 0.0]", "[-0.9, 0.0, 0.0]"),
     r"^rig\.toml: \[lens\] radial_coefficients = \[-0\.9, 0\.0, 0\.0\] fold the image back on itself at \d+ % of the way"),
    (LENS.replace("[960.0, 540.0]", "[960.0, 1540.0]"),
     r"^rig\.toml: \[lens\] principal_point_px = \[960\.0, 1540\.0\] must lie inside the 1920×1080 frame"),
    (LENS.replace("principal_point_px = [960.0, 540.0]\n", ""),
     r"^rig\.toml: missing key \[lens\] principal_point_px \(principal point c_x, c_y in the displayed frame\); copy the whole table"),
]


@pytest.mark.parametrize("text, message", BAD_LENS)
def test_bad_lens_table_message(rig_in, text, message):
    with pytest.raises(UsageError, match=message) as info:
        load_rig(rig_in(SCALE + text))
    assert "\n" not in str(info.value) and info.value.exit_code == 2


def test_lens_table_reaches_the_scale_and_the_marks(rig_in):
    plain = load_rig(rig_in(SCALE + "[marks]\npoints_px = [[500.0, 400.0]]\n", "plain.toml"))
    rig = load_rig(rig_in(SCALE + "[marks]\npoints_px = [[500.0, 400.0]]\n" + LENS))
    assert plain.lens is None and not plain.scale().lens_corrected
    assert rig.lens.image_size_px == (1920, 1080) and rig.lens.tangential_coefficients == (0.0, 0.0)
    scale = rig.scale()
    assert scale.lens is rig.lens
    # the scale points were undistorted: the same clicked points give another px/mm
    ux, uy = rig.lens.undistort_px([500.0, 500.0], [100.0, 700.0])
    assert scale.px_per_mm == pytest.approx(math.hypot(ux[1] - ux[0], uy[1] - uy[0]) / 300.0, rel=1e-12)
    assert abs(scale.px_per_mm / plain.scale().px_per_mm - 1) > 0.005
    # marks go through the same correction
    mx, my = rig.lens.undistort_px(500.0, 400.0)
    assert rig.marks_z_mm()[0] == pytest.approx(float(scale.to_mm(500.0, 400.0)[0]), rel=1e-12)
    assert rig.marks_z_mm()[0] != pytest.approx(float(plain.marks_z_mm()[0]), rel=1e-4)
    assert json.loads(json.dumps(rig.to_dict()))["lens"]["focal_length_px"] == [1450.0, 1450.0]
    # tangential coefficients are optional
    rig2 = load_rig(rig_in(SCALE + LENS.replace("tangential_coefficients = [0.0, 0.0]\n", ""), "t.toml"))
    assert rig2.lens.tangential_coefficients == (0.0, 0.0)
