"""Finding the sphere: background model, full-frame acquisition, sub-pixel centre in a window.

Coordinates are those of the displayed frame (rotation already applied by ``tracker.video``):
x to the right, y down, origin at the centre of the top-left pixel. Two frames of reference
appear here:

- the *frame* (sensor) frame: pixel coordinates of the decoded picture, which moves when the
  camera shakes;
- the *scene* frame: the coordinates of the static scene (tube, ruler, marks) as it appeared in
  the reference frame. A point at scene position ``p`` appears at ``p + shift`` in a frame whose
  registration shift (``tracker.stabilize``) is ``shift = (dx_px, dy_px)``.

The background model lives in the scene frame; every function that compares a frame with it
takes the frame's ``shift``.

Method of the sub-pixel centre (``measure``)
-------------------------------------------
The centre is the first moment of a *fractional-occupancy* image inside a symmetric aperture
that is re-centred on the estimate until it stops moving:

1. The background patch is resampled into the frame's window (sub-pixel shift) and scaled by a
   local gain measured on the ring of background pixels around the object (median of
   frame / background). This removes the static scene (walls, marks, ruler), auto-exposure
   changes and mains flicker (the gain is local, so even the row-dependent bands of flicker
   under a rolling shutter are taken out).
2. Each pixel's occupancy ``o`` in [0, 1] is the fraction of that pixel covered by the sphere,
   averaged over the exposure. For a dark (back-lit) sphere it follows per pixel from the
   background level and the sphere's own level, ``o = (g·B − I) / (g·B − L)``; for a bright
   sphere, whose shading is not uniform, the full-contrast level is taken from the brightest
   part of the sphere next to each pixel (a local maximum filter), so a dim limb is not
   under-weighted. Pixels below a noise gate are zero; other objects in the window are removed
   by connectivity.
3. Inside a silhouette every pixel is fully covered whatever the sphere's own surface shows
   there (a specular highlight, shading), so once the sphere's level is known the interior (the
   outline eroded by one pixel, and by half the streak length at the ends of a motion-blur
   streak) is set to 1 and holes in the mask are filled: only the rim carries fractional
   occupancy, and a highlight cannot pull the centre.
4. The centroid of ``o`` within a soft elliptical aperture is iterated with the aperture
   re-centred on the estimate. At the fixed point, background noise inside the aperture is
   symmetric about the estimate and adds no bias.

Why occupancy moments rather than a model fit: the moments of the occupancy are exact for any
shape that is point-symmetric about the centre (disc, ellipse magnified sideways by the tube,
motion-blur streak under constant velocity, symmetric defocus), so no model of blur, PSF or
codec smoothing is needed, and the cost is a few array operations on a window of a few hundred
pixels (a non-linear fit costs ~10× more per frame). Motion blur preserves the integral of the
occupancy, so the area also gives the true vertical diameter: ``d_v = 4·A / (π·d_h)``; the
horizontal diameter comes from the horizontal second moment (blur runs along the fall) and the
streak length from the excess of the vertical second moment.
"""

from __future__ import annotations

from dataclasses import dataclass

import cv2
import numpy as np
from numpy.typing import NDArray

__all__ = [
    "Background",
    "Candidate",
    "Measurement",
    "measure",
]

POLARITIES = ("dark", "bright")

# Noise gate on occupancy, in units of the local background noise: pixels below it are zero.
# 2σ removes 98 % of pure-noise mass while keeping the faint edge of a blurred sphere.
_GATE_SIGMA = 2.0
# Connectivity threshold (σ and fraction of the peak contrast) that defines the object's extent.
_LINK_SIGMA = 3.5
_LINK_FRACTION = 0.15
# Local gain (frame / background on the ring around the object): background darker than this
# (DN) does not enter the ratio, and the gain is not taken below _GAIN_MIN.
_GAIN_MIN_BG_DN = 8.0
_GAIN_MIN = 0.05
# Smallest contrast (grey levels) an object must reach to be measured at all.
_MIN_CONTRAST_DN = 4.0
# Below this fraction of the usual contrast the object cannot be seen against the scene
# (a dark mark behind or in front of a dark ball): such frames are gaps, not biased points.
_OCCLUDED_FRACTION = 0.35
# A motion-blur streak longer than this (px) keeps the fully-covered interior away from the
# streak's ends; shorter ones are within the 1-px rim (defocus, noise make ~1–2 px apparent).
_STREAK_MIN_PX = 2.5
# Width (px) of the soft edge of the measuring aperture.
_APERTURE_RAMP_PX = 1.5
# Convergence of the re-centred aperture (px) and maximum number of iterations.
_CENTRE_TOL_PX = 0.002
_CENTRE_MAX_ITER = 12


@dataclass(frozen=True)
class Candidate:
    """A coarse detection from full-frame acquisition (downsampled).

    Attributes
    ----------
    x_px, y_px : float
        Approximate centre in the frame (sensor) frame, px.
    polarity : str
        "dark" (darker than the background) or "bright".
    width_px, height_px : float
        Extent of the blob in full-resolution pixels.
    strength : float
        Peak contrast × area of the blob in the downsampled difference image (ranking only).
    """

    x_px: float
    y_px: float
    polarity: str
    width_px: float
    height_px: float
    strength: float


@dataclass(frozen=True)
class Measurement:
    """Sub-pixel measurement of one object in one frame.

    Attributes
    ----------
    x_px, y_px : float
        Centre in the frame (sensor) frame, px.
    pos_u_px : float
        Standard uncertainty of the centre per axis from the local noise, px.
    diameter_h_px, diameter_v_px : float
        Apparent horizontal and vertical diameters (vertical corrected for motion blur), px.
    blur_px : float
        Length of the motion-blur streak along y, px.
    contrast_dn : float
        Full contrast between object and background (grey levels, after gain normalisation).
    area_px : float
        Integral of the occupancy (apparent area), px².
    hole_fraction : float
        Fraction of the filled silhouette that was a hole (a specular highlight is small; a
        bubble's bright centre is large).
    gain : float
        Local gain of this frame relative to the background.
    noise_dn : float
        Local background noise (robust standard deviation), grey levels.
    level_dn : float
        The object's own grey level in its fully covered core, divided by the gain (NaN when no
        pixel is fully covered); used to normalise later measurements of the same object.
    touches_edge : bool
        The object reaches the edge of the measuring window (clipped or merged with something).
    """

    x_px: float
    y_px: float
    pos_u_px: float
    diameter_h_px: float
    diameter_v_px: float
    blur_px: float
    contrast_dn: float
    area_px: float
    hole_fraction: float
    gain: float
    noise_dn: float
    level_dn: float
    touches_edge: bool


class Background:
    """Background model of the static scene, in the scene frame.

    The model is a float32 image initialised from the first frame and refreshed by a selective
    running average that never learns inside the windows of objects being tracked. A
    downsampled copy serves full-frame acquisition.

    Parameters
    ----------
    first_luma : ndarray of shape (H, W), uint8
        First usable frame (its position defines the scene frame).
    downsample : int or None
        Integer factor for acquisition; default chosen so the long side is ~480 px or less.
    """

    def __init__(self, first_luma: NDArray[np.uint8], *, downsample: int | None = None) -> None:
        if first_luma.ndim != 2:
            raise ValueError(f"first_luma: expected a 2-D grey image, got shape {first_luma.shape}")
        self.height_px, self.width_px = first_luma.shape
        if downsample is None:
            downsample = max(1, int(round(max(self.width_px, self.height_px) / 480.0)))
        self.factor = int(downsample)
        self.image = first_luma.astype(np.float32)
        self._small_size = (max(1, self.width_px // self.factor), max(1, self.height_px // self.factor))
        self._xs_small = np.broadcast_to(np.arange(self._small_size[0], dtype=np.float64)[None, :],
                                         self._small_size[::-1])
        self._ys_small = np.broadcast_to(np.arange(self._small_size[1], dtype=np.float64)[:, None],
                                         self._small_size[::-1])
        self._n_searches = 0
        self._noise_small: tuple[float, float] | None = None
        self._refresh_small()

    def _refresh_small(self) -> None:
        w, h = self._small_size
        roi = self.image[: h * self.factor, : w * self.factor]
        self.small = cv2.resize(roi, (w, h), interpolation=cv2.INTER_AREA)

    def patch(self, x0: int, y0: int, width: int, height: int,
              shift: tuple[float, float]) -> NDArray[np.float32]:
        """Background resampled into a frame window.

        Parameters
        ----------
        x0, y0 : int
            Top-left pixel of the window in the frame, px.
        width, height : int
            Window size, px.
        shift : (float, float)
            Registration shift of the frame (frame = scene + shift), px.

        Returns
        -------
        ndarray of shape (height, width), float32
            Background grey levels at the window's pixels (bilinear resampling).
        """
        cx = x0 + (width - 1) / 2.0 - shift[0]
        cy = y0 + (height - 1) / 2.0 - shift[1]
        return cv2.getRectSubPix(self.image, (int(width), int(height)), (float(cx), float(cy)))

    def contains(self, x0: int, y0: int, x1: int, y1: int, shift: tuple[float, float]) -> bool:
        """True when the frame window [x0, x1) × [y0, y1) lies inside the frame and the scene.

        Parameters
        ----------
        x0, y0, x1, y1 : int
            Window bounds in the frame, px (end exclusive).
        shift : (float, float)
            Registration shift of the frame, px.

        Returns
        -------
        bool
        """
        if x0 < 0 or y0 < 0 or x1 > self.width_px or y1 > self.height_px:
            return False
        sx, sy = shift
        return (x0 - sx >= -0.5 and y0 - sy >= -0.5 and x1 - 1 - sx <= self.width_px - 0.5
                and y1 - 1 - sy <= self.height_px - 0.5)

    def update(self, luma: NDArray[np.uint8], shift: tuple[float, float],
               exclude_boxes: list[tuple[int, int, int, int]], alpha: float,
               region: tuple[int, int, int, int] | None = None) -> None:
        """Blend a frame into the model, except inside ``exclude_boxes``.

        Parameters
        ----------
        luma : ndarray of shape (H, W), uint8
            Current frame.
        shift : (float, float)
            Its registration shift, px. The frame is moved back by the nearest whole pixel
            (the model is smooth; half a pixel of jitter does not matter for it).
        exclude_boxes : list of (x0, y0, x1, y1)
            Scene-frame boxes not to learn (objects being tracked), px, end exclusive.
        alpha : float
            Blending weight of the new frame (0 < alpha ≤ 1).
        region : (x0, y0, x1, y1) or None
            Scene-frame box to which the update is limited, px, end exclusive (None: everywhere).
        """
        ix, iy = int(round(shift[0])), int(round(shift[1]))
        h, w = self.height_px, self.width_px
        # scene pixel (x, y) is at frame pixel (x + ix, y + iy)
        sx0, sx1 = max(0, -ix), min(w, w - ix)
        sy0, sy1 = max(0, -iy), min(h, h - iy)
        if sx1 - sx0 < 8 or sy1 - sy0 < 8:
            return
        src = luma[sy0 + iy: sy1 + iy, sx0 + ix: sx1 + ix]
        dst = self.image[sy0:sy1, sx0:sx1]
        if region is None:
            mask = np.full(src.shape, 255, np.uint8)
        else:
            mask = np.zeros(src.shape, np.uint8)
            rx0, ry0, rx1, ry1 = region
            mask[max(0, ry0 - sy0): max(0, ry1 - sy0), max(0, rx0 - sx0): max(0, rx1 - sx0)] = 255
        for bx0, by0, bx1, by1 in exclude_boxes:
            mask[max(0, by0 - sy0): max(0, by1 - sy0), max(0, bx0 - sx0): max(0, bx1 - sx0)] = 0
        cv2.accumulateWeighted(src, dst, float(alpha), mask)
        self._refresh_small()

    def find_candidates(self, luma: NDArray[np.uint8], shift: tuple[float, float], *,
                        exclude_boxes: list[tuple[int, int, int, int]] = (),
                        max_candidates: int = 6, min_sigma: float = 5.0) -> list[Candidate]:
        """Coarse full-frame search for compact objects darker or brighter than the background.

        Works on the downsampled frame: difference with the (shifted, gain-normalised)
        background, robust noise estimate (refreshed every 10th search), threshold at
        ``min_sigma`` σ (and at least 1.5 × _MIN_CONTRAST_DN, since codec-flattened areas make the
        noise estimate tiny), connected components; a component's polarity is the sign of its
        summed difference (a dark sphere with a highlight stays one dark object). Thin elongated residues (misregistered edges), objects touching
        the frame border (entering or leaving, a hand) and very large regions are dropped.

        Parameters
        ----------
        luma : ndarray of shape (H, W), uint8
            Current frame.
        shift : (float, float)
            Its registration shift, px.
        exclude_boxes : list of (x0, y0, x1, y1)
            Frame boxes to ignore (objects already followed), px.
        max_candidates : int
            Maximum number of candidates returned (strongest first).
        min_sigma : float
            Detection threshold in units of the difference image's robust noise.

        Returns
        -------
        list of Candidate
            In frame coordinates, strongest first.
        """
        f = self.factor
        w, h = self._small_size
        frame_small = _area_downsample(luma[: h * f, : w * f], f).astype(np.float32)
        if abs(shift[0]) > 0.05 * f or abs(shift[1]) > 0.05 * f:
            m = np.float32([[1, 0, shift[0] / f], [0, 1, shift[1] / f]])
            bg = cv2.warpAffine(self.small, m, (w, h), flags=cv2.INTER_LINEAR,
                                borderMode=cv2.BORDER_REPLICATE)
        else:
            bg = self.small
        # Row-band gain (auto exposure; mains flicker with a rolling shutter makes bands).
        n_bands = max(1, min(16, h // 8))
        rows = (h // n_bands) * n_bands
        step = max(1, rows // n_bands // 4)
        ratio = (frame_small[:rows, ::4] / np.maximum(bg[:rows, ::4], 1.0)).reshape(n_bands, rows // n_bands, -1)
        band_gain = np.median(ratio[:, ::step].reshape(n_bands, -1), axis=1).astype(np.float32)
        gains = np.repeat(band_gain, h // n_bands)
        gains = np.concatenate([gains, np.full(h - rows, band_gain[-1], np.float32)])
        diff = frame_small - bg * gains[:, None]
        self._n_searches += 1
        if self._noise_small is None or self._n_searches % 10 == 1:
            sample = diff[::3, ::3]
            med = _median(sample)
            self._noise_small = (med, 1.4826 * _median(np.abs(sample - med)))
        med, sigma = self._noise_small
        thr = max(min_sigma * sigma, _MIN_CONTRAST_DN * 1.5)
        mask = (np.abs(diff - med) > thr).astype(np.uint8)
        n, labels, stats, _ = cv2.connectedComponentsWithStats(mask, connectivity=8)
        if n < 2:
            return []
        x, y, bw, bh, area = (stats[1:, k].astype(np.int64) for k in range(5))
        keep = ((x >= 1) & (y >= 1) & (x + bw <= w - 1) & (y + bh <= h - 1)   # not at the border
                & (bw <= w // 3) & (bh <= h // 3)                              # not huge (a hand)
                & ~((np.maximum(bw, bh) >= 4) & (area < 0.25 * bw * bh))       # compact
                & ~((np.maximum(bw, bh) > 6 * np.minimum(bw, bh)) & (np.maximum(bw, bh) > 3)))
        if not keep.any():
            return []
        ys, xs = np.nonzero(mask)
        lab = labels[ys, xs]
        dv = diff[ys, xs] - med
        wts = np.abs(dv)
        tot = np.bincount(lab, weights=wts, minlength=n)[1:]
        signed = np.bincount(lab, weights=dv, minlength=n)[1:]
        sx = np.bincount(lab, weights=wts * xs, minlength=n)[1:]
        sy = np.bincount(lab, weights=wts * ys, minlength=n)[1:]
        found: list[Candidate] = []
        for k in np.nonzero(keep)[0][np.argsort(-tot[keep])][: 4 * max_candidates]:
            cx = sx[k] / tot[k] * f + (f - 1) / 2.0
            cy = sy[k] / tot[k] * f + (f - 1) / 2.0
            if any(bx0 <= cx < bx1 and by0 <= cy < by1 for bx0, by0, bx1, by1 in exclude_boxes):
                continue
            polarity = "dark" if signed[k] < 0 else "bright"
            found.append(Candidate(float(cx), float(cy), polarity, float(bw[k] * f),
                                   float(bh[k] * f), float(tot[k])))
            if len(found) >= max_candidates:
                break
        return found


def _area_downsample(image: NDArray[np.uint8], factor: int) -> NDArray[np.uint8]:
    """Mean of ``factor`` × ``factor`` blocks (sides multiples of ``factor``), by halvings first:
    OpenCV halves a uint8 image ~6× faster than it reduces it 4× in one step (0.12 against
    0.70 ms for 1080p); each step rounds, by at most half a DN."""
    while factor % 2 == 0:
        image = cv2.resize(image, (image.shape[1] // 2, image.shape[0] // 2), interpolation=cv2.INTER_AREA)
        factor //= 2
    if factor == 1:
        return image
    return cv2.resize(image, (image.shape[1] // factor, image.shape[0] // factor),
                      interpolation=cv2.INTER_AREA)


def _median(a: NDArray) -> float:
    """Median of an array (upper median for even sizes; cheaper than numpy.median on small data)."""
    flat = a.ravel()
    k = flat.size // 2
    return float(np.partition(flat, k)[k])


def _streak_length(o: NDArray[np.float64], xs: NDArray[np.float64], ys: NDArray[np.float64]) -> float:
    """Length of the vertical motion-blur streak from the occupancy moments, px.

    ``o`` is the occupancy at the pixels (``xs``, ``ys``). Motion blur keeps the occupancy's
    integral (area A) and horizontal moment (width d_h) and adds L²/12 to the vertical variance
    of the disc's d_v²/16, with d_v = 4A/(π d_h).
    """
    area = float(o.sum())
    if area <= 0:
        return 0.0
    cx = float(o @ xs) / area
    cy = float(o @ ys) / area
    var_x = float(o @ (xs - cx) ** 2) / area - 1.0 / 12.0
    var_y = float(o @ (ys - cy) ** 2) / area - 1.0 / 12.0
    d_h = 4.0 * np.sqrt(max(var_x, 1e-6))
    d_v = 4.0 * area / (np.pi * d_h)
    return float(np.sqrt(max(0.0, 12.0 * (var_y - d_v ** 2 / 16.0))))


def _fill_holes(mask: NDArray[np.uint8]) -> NDArray[np.uint8]:
    """Fill the holes of a binary mask (pixels not connected to the window border)."""
    h, w = mask.shape
    flood = np.zeros((h + 2, w + 2), np.uint8)
    flood[1:-1, 1:-1] = mask
    cv2.floodFill(flood, None, (0, 0), 2)
    return (flood[1:-1, 1:-1] != 2).astype(np.uint8)


_K3 = np.ones((3, 3), np.uint8)


def measure(luma: NDArray[np.uint8], background: Background, shift: tuple[float, float],
            x_guess_px: float, y_guess_px: float, polarity: str, *,
            half_width_px: float, half_height_px: float,
            level_dn: float | None = None,
            footprint_px: tuple[float, float] | None = None) -> tuple[Measurement | None, str]:
    """Sub-pixel centre, size and contrast of one object near a guessed position.

    Parameters
    ----------
    luma : ndarray of shape (H, W), uint8
        Current frame, displayed orientation.
    background : Background
        Model of the static scene.
    shift : (float, float)
        Registration shift of this frame (frame = scene + shift), px.
    x_guess_px, y_guess_px : float
        Guessed centre in the frame, px.
    polarity : {"dark", "bright"}
        Sign of the object's contrast.
    half_width_px, half_height_px : float
        Expected half extent of the object including blur, px; the window adds a margin.
    level_dn : float or None
        The object's own gain-normalised grey level from earlier frames
        (``Measurement.level_dn``). None: estimate it from this frame; a dark object with no
        fully covered pixel is then taken as black (a uniform scale error of the occupancy does
        not move the centroid).
    footprint_px : (float, float) or None
        Expected horizontal and vertical extent (diameter + blur) of the object, px (None: the
        extent measured here). Where the background inside this footprint is as dark (or bright)
        as the object itself, the object cannot be seen there (a mark in front of or behind it, a
        tube wall, its own imprint in a background learnt while it lay there): the measurement
        is refused as "occluded" rather than biased.

    Returns
    -------
    measurement : Measurement or None
        None when nothing usable is there.
    reason : str
        "" on success, otherwise why not: "edge" (window outside the frame or the scene),
        "faint" (no contrast above the noise), "none" (nothing connected to the guess),
        "occluded" (part of the object is hidden by the scene).
    """
    if polarity not in POLARITIES:
        raise ValueError(f"polarity: got {polarity!r}; expected one of {POLARITIES}")
    margin = 3.0 + 0.35 * max(half_width_px, half_height_px)
    hw = int(np.ceil(half_width_px + margin))
    hh = int(np.ceil(half_height_px + margin))
    xc, yc = int(round(x_guess_px)), int(round(y_guess_px))
    x0, x1, y0, y1 = xc - hw, xc + hw + 1, yc - hh, yc + hh + 1
    if not background.contains(x0, y0, x1, y1, shift):
        return None, "edge"
    img = luma[y0:y1, x0:x1].astype(np.float32)
    bgp = background.patch(x0, y0, x1 - x0, y1 - y0, shift)
    h, w = img.shape
    xv = np.arange(w, dtype=np.float32)
    yv = np.arange(h, dtype=np.float32)
    x, y = xv[None, :], yv[:, None]
    gx, gy = x_guess_px - x0, y_guess_px - y0

    # 1. local gain and noise from the ring outside the expected object
    inner = (((x - gx) / (half_width_px + 1.5)) ** 2 + ((y - gy) / (half_height_px + 1.5)) ** 2) <= 1.0
    ring = ~inner
    n_ring = int(ring.sum())
    if n_ring < 16:
        return None, "edge"
    bg_ring = bgp[ring]
    # the gain is a ratio: only background bright enough to carry one counts (a dark-field
    # scene can be black, 0 DN, around a bright ball)
    lit = bg_ring >= _GAIN_MIN_BG_DN
    gain = _median(img[ring][lit] / bg_ring[lit]) if int(lit.sum()) >= 16 else 1.0
    gain = max(gain, _GAIN_MIN)
    gbg = gain * bgp
    d = (img - gbg) if polarity == "bright" else (gbg - img)
    ring_d = d[ring]
    noise = 1.4826 * _median(np.abs(ring_d - _median(ring_d))) + 0.3

    # 2. peak contrast and the object's extent (connected to the guess)
    d_smooth = cv2.blur(d, (3, 3))
    peak = float(d_smooth[inner].max())
    if peak < max(_MIN_CONTRAST_DN, 3.0 * noise):
        return None, "faint"
    link = (d > max(_LINK_SIGMA * noise, _LINK_FRACTION * peak)).astype(np.uint8)
    n_lab, labels = cv2.connectedComponents(link, connectivity=8)
    if n_lab < 2:
        return None, "none"
    # the component carrying most contrast inside the expected region
    weights = np.bincount(labels[inner], weights=np.maximum(d[inner], 0.0), minlength=n_lab)
    weights[0] = 0.0
    main_label = int(np.argmax(weights))
    if weights[main_label] <= 0:
        return None, "none"
    main = (labels == main_label).astype(np.uint8)
    filled = _fill_holes(main)
    # the filled outline has the object's bounding box (its holes are enclosed); rows come sorted
    fy_i, fx_i = np.nonzero(filled)
    fx_lo, fx_hi = int(fx_i.min()), int(fx_i.max())
    touches = bool(fy_i[0] == 0 or fy_i[-1] == h - 1 or fx_lo == 0 or fx_hi == w - 1)
    support = cv2.dilate(filled, _K3)
    sy_i, sx_i = np.nonzero(support)     # occupancy is 0 outside the support from here on
    px = sx_i.astype(np.float64)
    py = sy_i.astype(np.float64)
    interior = cv2.erode(filled, _K3).astype(bool)
    holes = (filled > 0) & (main == 0)
    n_filled = float(fy_i.size)
    hole_fraction = float(holes.sum()) / max(n_filled, 1.0)

    # 3. occupancy
    core = cv2.erode(main, _K3).astype(bool)
    level_obs = float("nan")
    if core.sum() >= 4:
        vals = img[core] / gain
        q = vals.size * 3 // 10 if polarity == "dark" else vals.size * 7 // 10
        level_obs = float(np.partition(vals, q)[q])
    lev = level_dn if level_dn is not None and np.isfinite(level_dn) else level_obs
    lev_known = lev
    if polarity == "dark":
        lev = 0.0 if not np.isfinite(lev) else max(lev, 0.0)
        full = np.maximum(gbg - gain * lev, 1.0)
    else:
        # shading of a lit sphere: amplitude extrapolated by a plane fitted to the interior
        n_int = int(interior.sum())
        full = np.full(d.shape, peak, np.float32)
        if n_int >= 6:
            iy, ix = np.nonzero(interior)
            dv = d[iy, ix]
            keep = dv < 1.5 * _median(dv)          # leave out a specular highlight
            if keep.sum() >= 6:
                a = np.column_stack([np.ones(int(keep.sum())), ix[keep], iy[keep]])
                coef = np.linalg.lstsq(a, dv[keep], rcond=None)[0]
                full = (coef[0] + coef[1] * x + coef[2] * y).astype(np.float32)
        full = np.maximum(full, max(_LINK_SIGMA * noise, 0.3 * peak))
    occ = np.clip(d / full, 0.0, 1.0)
    occ[d < _GATE_SIGMA * noise] = 0.0
    occ *= support
    if polarity == "bright" or np.isfinite(lev_known):
        # Inside the silhouette every pixel is fully covered, however bright the sphere's own
        # surface is there (highlight, shading): only the rim carries fractional occupancy. With
        # motion blur the ends of the streak are covered only part of the exposure, so the
        # interior keeps half a streak length away from the top and bottom.
        occ[holes] = 1.0
        # the highlight's missing mass inflates the moment estimate; the filled outline's height
        # minus its width cannot be fooled by it (and is no larger than the streak unless the tube
        # magnifies sideways, which only shortens it)
        outline = float((fy_i[-1] - fy_i[0]) - (fx_hi - fx_lo))
        blur0 = min(_streak_length(occ[sy_i, sx_i].astype(np.float64), px, py), max(outline, 0.0) + 2.0)
        k = 1 + 2 * int(np.ceil(blur0 / 2.0)) if blur0 > _STREAK_MIN_PX else 3
        inside = cv2.erode(filled, np.ones((k, 3), np.uint8)).astype(bool) if k > 3 else interior
        occ[inside] = 1.0
    occ[holes] = 1.0

    # 4. re-centred symmetric aperture (on the support pixels only: occupancy is 0 elsewhere)
    o = occ[sy_i, sx_i]
    ax = max((px.max() - px.min() + 1) / 2.0 + 1.0, 2.0)
    ay = max((py.max() - py.min() + 1) / 2.0 + 1.0, 2.0)
    tot = float(o.sum())
    if tot <= 0:
        return None, "none"
    cx = float(o @ px) / tot
    cy = float(o @ py) / tot
    ramp = min(ax, ay) / _APERTURE_RAMP_PX
    for _ in range(_CENTRE_MAX_ITER):
        wap = np.clip((1.0 - np.sqrt(((px - cx) / ax) ** 2 + ((py - cy) / ay) ** 2)) * ramp + 0.5, 0.0, 1.0)
        wo = o * wap
        tot = float(wo.sum())
        if tot <= 0:
            return None, "none"
        nx = float(wo @ px) / tot
        ny = float(wo @ py) / tot
        moved = abs(nx - cx) + abs(ny - cy)
        cx, cy = nx, ny
        if moved < _CENTRE_TOL_PX:
            break
    if footprint_px is None:
        # this measurement's own extent: width from the horizontal moment, height with blur
        var_x0 = float(o @ (px - cx) ** 2) / tot - 1.0 / 12.0
        var_y0 = float(o @ (py - cy) ** 2) / tot - 1.0 / 12.0
        footprint_px = (4.0 * np.sqrt(max(var_x0, 1e-6)), np.sqrt(12.0 * max(var_y0, 1e-6)))
    if np.isfinite(lev):
        # contrast the object could have at each pixel against what it has on average; only
        # where some pixel of the window could hide it is the footprint checked
        capacity = np.abs(bgp - lev)
        low = capacity < _OCCLUDED_FRACTION * _median(capacity[ring])
        if low.any():
            fx, fy = footprint_px[0] / 2.0 + 1.0, footprint_px[1] / 2.0 + 1.0
            foot = (((x - cx) / fx) ** 2 + ((y - cy) / fy) ** 2) <= 1.0
            if (low & foot).any():
                return None, "occluded"
    wap = np.clip((1.0 - np.sqrt(((px - cx) / ax) ** 2 + ((py - cy) / ay) ** 2)) * ramp + 0.5, 0.0, 1.0)
    wo = o * wap
    area = float(wo.sum())
    dx2 = (px - cx) ** 2
    dy2 = (py - cy) ** 2
    var_x = float(wo @ dx2) / area - 1.0 / 12.0
    var_y = float(wo @ dy2) / area - 1.0 / 12.0
    d_h = 4.0 * np.sqrt(max(var_x, 1e-6))
    d_v = 4.0 * area / (np.pi * d_h)
    blur = float(np.sqrt(max(0.0, 12.0 * (var_y - d_v ** 2 / 16.0))))

    # 5. uncertainty: noise of the unclipped (edge) occupancy pixels, propagated to the centroid
    partial = (o > 0) & (o < 1)
    s2 = (wap * noise / full[sy_i, sx_i]) ** 2 * partial
    pos_u = float(np.sqrt(0.5 * float(s2 @ (dx2 + dy2)))) / area
    return Measurement(
        x_px=float(x0 + cx), y_px=float(y0 + cy), pos_u_px=max(pos_u, 0.005),
        diameter_h_px=float(d_h), diameter_v_px=float(d_v), blur_px=blur,
        contrast_dn=_median(full[sy_i, sx_i]), area_px=area,
        hole_fraction=hole_fraction, gain=gain, noise_dn=noise, level_dn=level_obs,
        touches_edge=touches,
    ), ""
