"""report.html: self-contained, numbers formatted with their uncertainties, the dominant budget
term marked, every string escaped, safety text present; the same for the series report."""

import base64
import html.parser
import importlib.util
import pathlib
import re

import pytest

from fallcam import plots
from fallcam.report import format_measurement, write_report, write_series_report
from fallcam.safety import SAFETY_CAUTIONS

_spec = importlib.util.spec_from_file_location(
    "report_case", pathlib.Path(__file__).with_name("_report_case.py"))
case = importlib.util.module_from_spec(_spec)
_spec.loader.exec_module(case)

ATTACK = "<script>alert('x')</script> & \"quotes\""
ESCAPED_ATTACK = "&lt;script&gt;alert(&#x27;x&#x27;)&lt;/script&gt; &amp; &quot;quotes&quot;"
VOID_TAGS = {"meta", "img", "br", "hr", "link", "input"}


class _TagChecker(html.parser.HTMLParser):
    """Collects every start tag and checks that non-void tags close in order."""

    def __init__(self):
        super().__init__()
        self.stack, self.errors, self.tags = [], [], []

    def handle_starttag(self, tag, attrs):
        self.tags.append((tag, dict(attrs)))
        if tag not in VOID_TAGS:
            self.stack.append(tag)

    def handle_endtag(self, tag):
        if not self.stack or self.stack[-1] != tag:
            self.errors.append(f"</{tag}> closes {self.stack[-1:]}")
        else:
            self.stack.pop()


def parse(text: str) -> _TagChecker:
    checker = _TagChecker()
    checker.feed(text)
    checker.close()
    assert not checker.errors and not checker.stack, (checker.errors, checker.stack)
    return checker


@pytest.fixture(scope="module")
def figures(tmp_path_factory):
    folder = tmp_path_factory.mktemp("figures")
    traj, summary = case.trajectory(), case.summary()
    return {name: getattr(plots, name)(traj, summary, folder / f"{name}.png")
            for name in ("position_time", "velocity_time", "residuals")}


@pytest.mark.parametrize(("value", "u", "expected"), [
    (10.0123, 0.0045, "10.0123 ± 0.0045"),
    (1.30721, 0.048786, "1.307 ± 0.049"),
    (1234.56, 12.3, "1235 ± 12"),
    (3.21e-5, 1.5e-6, "(3.21 ± 0.15)e-05"),
    (2.5e6, 3.1e4, "(2.500 ± 0.031)e+06"),
    (0.5, 2.34, "0.5 ± 2.3"),
    (-0.164, 0.069, "-0.164 ± 0.069"),
    (5.0, None, "5"),
    (5.0, 0.0, "5"),
    (float("nan"), 0.1, "—"),
    (None, 0.1, "—"),
])
def test_format_measurement(value, u, expected):
    assert format_measurement(value, u) == expected


def test_report_is_self_contained_and_well_formed(tmp_path, figures):
    out = write_report(case.summary(), tmp_path, figures)
    assert out == tmp_path / "report.html"
    assert [p.name for p in tmp_path.iterdir()] == ["report.html"]  # no temporary file left
    text = out.read_text(encoding="utf-8")
    checker = parse(text)
    for tag, attrs in checker.tags:
        for key in ("src", "href"):
            assert not attrs.get(key, "").startswith(("http", "//")), f"external {tag} {key}"
    assert not re.search(r"(src|href)\s*=\s*[\"']?(https?:)?//", text)
    assert "url(" not in text and "@import" not in text and "<script" not in text
    images = [attrs["src"] for tag, attrs in checker.tags if tag == "img"]
    assert len(images) == 3
    for src, path in zip(images, figures.values(), strict=True):
        assert src.startswith("data:image/png;base64,")
        assert base64.b64decode(src.split(",", 1)[1]) == path.read_bytes()


def test_report_headline_numbers(tmp_path, figures):
    summary = case.summary()
    track = summary["tracks"][0]
    text = write_report(summary, tmp_path, figures).read_text(encoding="utf-8")
    assert "10.0123 ± 0.0045 mm/s" in text  # v_t ± u (k = 1), in mm/s
    mu_text = format_measurement(track["viscosity_pa_s"], track["viscosity_U_pa_s"])
    assert f"{mu_text} Pa·s" in text and "(k = 2)" in text
    assert "0.0193" in text and "0.9159" in text  # Re, wall factor
    assert "-8.407 %" in text  # wall correction and its size
    assert "3.7800 ± 0.0021" in text  # mark crossing
    assert "0.1 s (2.2 % of the time)" in text  # hand timing beside video timing
    assert "+1.33 %" in text and "+0.37" in text  # reference comparison, z-score
    assert "16.3 / 16.67 / 17.1 ms" in text  # frame intervals
    assert "container (per-frame times from the file)" in text


def test_dominant_budget_term_is_marked(tmp_path):
    text = write_report(case.summary(), tmp_path).read_text(encoding="utf-8")
    dominant_rows = re.findall(r'<tr class="dominant">(.*?)</tr>', text)
    assert len(dominant_rows) == 1
    assert "▶ temperature" in dominant_rows[0] and "(dominant)" in dominant_rows[0]
    share = re.search(r'width:([\d.]+)%', dominant_rows[0])
    assert float(share.group(1)) == pytest.approx(97.9, abs=0.1)
    assert "The largest term is <b>temperature</b>" in text


def test_dominant_term_found_from_shares_when_not_named(tmp_path):
    summary = case.summary()
    budget = summary["tracks"][0]["budget"]
    del budget["dominant"]
    budget["rows"][0]["share"] = 0.99  # ball diameter now the largest share
    text = write_report(summary, tmp_path).read_text(encoding="utf-8")
    (row,) = re.findall(r'<tr class="dominant">(.*?)</tr>', text)
    assert "▶ ball diameter" in row


def test_every_string_is_escaped(tmp_path):
    summary = case.summary(warnings=[ATTACK])
    summary["clip"] = ATTACK
    summary["warnings"].append(ATTACK)
    summary["rig"]["liquid"]["density_provenance"] = ATTACK
    summary["tracks"][0]["budget"]["rows"][0]["quantity"] = ATTACK
    summary["reference"]["source"] = ATTACK
    summary["command"] = ATTACK
    text = write_report(summary, tmp_path, {ATTACK: tmp_path / "missing.png"}).read_text(
        encoding="utf-8")
    assert "<script" not in text
    assert text.count(ESCAPED_ATTACK) >= 7
    parse(text)


def test_warnings_are_prominent(tmp_path):
    text = write_report(case.summary(warnings=["still accelerating at mark 1"]), tmp_path
                        ).read_text(encoding="utf-8")
    box = re.search(r'<div class="warnings" role="alert">(.*?)</div>', text).group(1)
    assert "Warnings (2)" in box
    assert "still accelerating at mark 1" in box and "2 duplicated frames" in box
    assert text.index('class="warnings"') < text.index("<h2>Results</h2>")


def test_safety_cautions_in_report(tmp_path):
    text = write_report({}, tmp_path).read_text(encoding="utf-8")
    for caution in SAFETY_CAUTIONS:
        assert caution.replace("'", "&#x27;") in text


@pytest.mark.parametrize("topic", ["eye protection", "stopper", "cracks", "cushion",
                                   "glycerol containers closed", "engine oil", "nitrile gloves",
                                   "spills", "children", "pacemakers", "eat or drink",
                                   "safety officer"])
def test_safety_cautions_cover_the_usual_topics(topic):
    assert any(topic in caution.lower() for caution in SAFETY_CAUTIONS), topic


def test_minimal_summary_degrades_gracefully(tmp_path):
    summary = {"clip": "x.mp4", "tracks": [{"id": 0, "direction": "down",
                                            "terminal_velocity_m_s": 0.01,
                                            "viscosity_pa_s": None, "marks": [
                                                {"index": 0, "terminal_at_mark": False}],
                                            "plateau": {"found": False,
                                                        "reason": "still accelerating"}}]}
    text = write_report(summary, tmp_path, {"residuals": tmp_path / "nope.png"}).read_text(
        encoding="utf-8")
    parse(text)
    assert "not computed" in text
    assert "not found: still accelerating" in text
    assert "NO: still accelerating" in text
    assert "Figure residuals missing" in text
    assert "No warnings." in text


def test_versions_and_inputs_are_recorded(tmp_path):
    text = write_report(case.summary(), tmp_path).read_text(encoding="utf-8")
    assert "fallcam analyze amber_2mm_a.mp4 --rig amber.toml --out out" in text
    assert "<th>numpy</th>" in text
    assert "<b>[liquid]</b>" in text and "glycerol-water model at 21.0 °C" in text


def _series_summary() -> dict:
    line = {"slope_m_s_per_m2": 2740.0, "u_slope_m_s_per_m2": 4.0, "chi2": 1.0, "dof": 2,
            "birge_ratio": 0.7, "mu_pa_s": 1.2913, "u_mu_pa_s": 0.0041}
    return {
        "manifest": "amber_series.csv", "command": "fallcam series amber_series.csv",
        "balls": [{"ball": "2 mm", "n": 3, "n_outliers": 1, "d_m": 0.002, "u_d_m": 2e-6,
                   "rho_s_kg_m3": 7810.0, "v_mean_m_s": 0.0100123, "v_corrected_m_s": 0.010934,
                   "u_v_m_s": 4.5e-6, "mu_pa_s": 1.3072, "u_mu_pa_s": 0.0031,
                   "reynolds_number": 0.0193, "wall_factor": 0.915933,
                   "inertia_factor_phi": 1.0036, "shear_rate_per_s": 5.0}],
        "drops": [{"label": ATTACK, "ball": "2 mm", "v_m_s": 0.0101, "robust_z": 4.2,
                   "outlier": True}],
        "pooled": {"value": 1.30, "u": 0.0025, "birge_ratio": 1.4, "p_value": 0.2,
                   "consistent": True},
        "fit_through_origin": {**line, "through_origin": True, "intercept_m_s": None},
        "fit_with_intercept": {**line, "through_origin": False, "intercept_m_s": -1.64e-4,
                               "u_intercept_m_s": 6.9e-5},
        "power_law": {"exponent": 2.0264, "u_exponent": 0.0067},
        "velocities_wall_corrected": True,
        "warnings": [ATTACK],
    }


def test_series_report(tmp_path):
    text = write_series_report(_series_summary(), tmp_path).read_text(encoding="utf-8")
    parse(text)
    assert "<script" not in text and ESCAPED_ATTACK in text
    assert "1.3000 ± 0.0050 Pa·s" in text  # pooled, k = 2 × ball-to-ball u, said so
    assert "ball-to-ball terms only" in text
    assert "1.2913 ± 0.0082 Pa·s" in text  # slope viscosity, k = 2
    assert "2.0264 ± 0.0067" in text  # exponent
    assert "-0.164 ± 0.069 mm/s" in text  # intercept
    assert "10.0123 ± 0.0045" in text and "3 (1)" in text  # per-ball row
    assert "<b>outlier, left out</b>" in text
    for caution in SAFETY_CAUTIONS[:3]:
        assert caution in text


def test_series_report_takes_the_budget_when_given(tmp_path):
    summary = _series_summary()
    summary["budget"] = {"rows": [{"quantity": "temperature", "share": 1.0}],
                         "combined_u_rel": 0.01, "k": 2.0, "expanded_U_rel": 0.02,
                         "dominant": "temperature"}
    text = write_series_report(summary, tmp_path).read_text(encoding="utf-8")
    assert "1.300 ± 0.026 Pa·s" in text and "from the budget" in text
    assert '<tr class="dominant">' in text
