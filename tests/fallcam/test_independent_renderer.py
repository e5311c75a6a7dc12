"""``fallcam analyze`` on clips drawn by a renderer that shares no code with ``tracker.synth``.

The clips are drawn with OpenCV (an anti-aliased filled circle placed to 1/16 px, straight lines for
the tube walls and the timing marks, a shading gradient, Gaussian noise) and written by
``cv2.VideoWriter`` in codecs the rest of the suite does not use (MPEG-4 Part 2 in MP4, Motion JPEG
in AVI). The sphere follows the exponential approach to a terminal velocity computed in closed
form from the generating viscosity:

- steady force balance with Oseen's first inertial correction, C_D = (24/Re)(1 + 3Re/16)
  (physics-references §4, Oseen 1910), solved as a quadratic for the unbounded speed;
- times Faxén's wall factor f_w = 1 − 2.104λ + 2.09λ³ − 0.95λ⁵ (physics-references §2).

Checks (issue 4 §5): v_t within 0.2 % and, as Re < 0.2 and d/D < 0.1 here, μ within 1 %. The limits
below are tighter; the analysis uses Haberman–Sayre, which agrees with Faxén within 0.2 % for
λ ≤ 0.3 (physics-references §2), 0.01 % at λ = 0.05.
"""

from __future__ import annotations

import json
import math

import cv2
import numpy as np
import pytest

from fallcam.cli import main

V_RTOL = 0.0005    # measured ≤ 0.001 %
MU_RTOL = 0.005    # measured ≤ 0.1 % once the truth carries the same Oseen term


def _terminal_velocity_mm_s(*, d_mm, tube_mm, rho_s, rho_f, mu, g):
    d = d_mm / 1000.0
    lam = d_mm / tube_mm
    f_w = 1.0 - 2.104 * lam + 2.09 * lam**3 - 0.95 * lam**5
    # Δρ g d²/18 = μ v + (3/16) ρ_f d v² (Stokes drag × (1 + 3Re/16), Re = ρ_f v d / μ)
    a, b, c = 3.0 / 16.0 * rho_f * d, mu, -(rho_s - rho_f) * g * d * d / 18.0
    v_inf = (-b + math.sqrt(b * b - 4.0 * a * c)) / (2.0 * a)
    return 1000.0 * f_w * v_inf, rho_f * v_inf * d / mu


def _render(path, *, fourcc, bright, rest_in_view, width=480, height=854, fps=30.0, dur_s=12.0,
            px_per_mm=5.0, d_mm=2.0, tube_mm=40.0, rho_s=7810.0, rho_f=1258.0, mu=1.0,
            g=9.80665, seed=0):
    v_t, re = _terminal_velocity_mm_s(d_mm=d_mm, tube_mm=tube_mm, rho_s=rho_s, rho_f=rho_f, mu=mu, g=g)
    tau_s = (rho_s + 0.5 * rho_f) * (d_mm / 1000.0) ** 2 / (18.0 * mu)
    rng = np.random.default_rng(seed)
    x0, y_mark1 = width / 2.0, 150.0
    y_mark2 = y_mark1 + 100.0 * px_per_mm                           # the marks are 100 mm apart
    z0_mm, t_release = (-5.0, 1.0) if rest_in_view else (-40.0, 0.3)  # mm below mark 1
    yy, xx = np.mgrid[0:height, 0:width]
    base = (200.0 - 30.0 * yy / height + 10.0 * np.cos(3.0 * xx / width)).astype(np.float32)
    ink, ball = (90.0, 25.0) if not bright else (165.0, 250.0)
    if bright:
        base = 135.0 - base + 60.0
    for x_wall in (x0 - tube_mm / 2 * px_per_mm, x0 + tube_mm / 2 * px_per_mm):
        cv2.line(base, (int(x_wall), 0), (int(x_wall), height), ink, 3)
    for y in (y_mark1, y_mark2):
        cv2.line(base, (int(x0 - 120), int(y)), (int(x0 - 60), int(y)), ink, 2)
    writer = cv2.VideoWriter(str(path), cv2.VideoWriter_fourcc(*fourcc), fps, (width, height))
    assert writer.isOpened(), f"OpenCV cannot write {fourcc}"
    r16 = int(round(d_mm / 2.0 * px_per_mm * 16))
    for i in range(int(dur_s * fps)):
        s = max(i / fps - t_release, 0.0)
        y = y_mark1 + px_per_mm * (z0_mm + v_t * (s - tau_s * (1.0 - math.exp(-s / tau_s))))
        img = base.copy()
        if -20 < y < height + 20:
            cv2.circle(img, (int(round(x0 * 16)), int(round(y * 16))), r16, ball, -1, cv2.LINE_AA, 4)
        img += rng.normal(0.0, 2.0, img.shape).astype(np.float32)
        writer.write(cv2.cvtColor(np.clip(np.round(img), 0, 255).astype(np.uint8), cv2.COLOR_GRAY2BGR))
    writer.release()
    rig = path.with_suffix(".toml")
    rig.write_text(f"""[liquid]
density_kg_m3 = {rho_f}
temperature_c = 20.0

[ball]
diameter_mm = {d_mm}
density_kg_m3 = {rho_s}

[tube]
inner_diameter_mm = {tube_mm}

[scale]
points_px = [[{x0 - 90}, {y_mark1}], [{x0 - 90}, {y_mark2}]]
distance_mm = 100.0

[marks]
points_px = [[{x0 - 90}, {y_mark1}], [{x0 - 90}, {y_mark2}]]

[site]
gravity_m_s2 = {g}
""", encoding="utf-8")
    return rig, v_t, mu, re, d_mm / tube_mm


@pytest.mark.parametrize("fourcc, suffix, bright, rest_in_view", [
    ("mp4v", ".mp4", False, False),
    ("MJPG", ".avi", True, True),
], ids=["mpeg4-dark-from-above", "mjpeg-bright-resting-in-view"])
def test_viscosity_from_an_independent_renderer(tmp_path, capsys, fourcc, suffix, bright, rest_in_view):
    clip = tmp_path / f"drop{suffix}"
    rig, v_true, mu_true, re, lam = _render(clip, fourcc=fourcc, bright=bright, rest_in_view=rest_in_view)
    assert re < 0.2 and lam < 0.1  # the regime where issue 4 asks for μ within 1 %
    code = main(["analyze", str(clip), "--rig", str(rig), "--out", str(tmp_path / "out"), "--json", "--quiet"])
    assert code == 0, capsys.readouterr().err
    summary = json.loads(capsys.readouterr().out)
    track = summary["tracks"][0]
    v = 1000.0 * track["terminal_velocity_m_s"]
    assert v == pytest.approx(v_true, rel=V_RTOL)
    assert track["viscosity_pa_s"] == pytest.approx(mu_true, rel=MU_RTOL)
