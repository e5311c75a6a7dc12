"""Registration of each frame to the static scene (camera shake, tripod taps, handheld jitter).

A phone on a tripod moves when the screen is touched, and a handheld clip wanders by several
pixels throughout. Positions must be measured relative to the scene (tube, ruler, marks), not
the sensor, so every frame is registered to a reference frame by a translation
``shift = (dx_px, dy_px)``: a static point at scene position ``p`` appears at ``p + shift``.

Method: a handful of textured patches of the reference frame (tube-wall edges, ruler ticks,
marks, the liquid surface) are chosen once. Each frame is aligned to them by Gauss–Newton
(Lucas–Kanade) on a translation shared by all patches, with a gain and an offset per patch so
that auto-exposure changes and mains flicker do not bias the shift. Patches with only vertical
edges constrain x and patches with horizontal edges constrain y; solving them jointly handles
this aperture problem. Patches that overlap a tracked object (given per frame) or that do not fit
(a hand in front of them) are left out. Patches are never placed on something in the reference
frame that looks like the sphere itself (a compact blob of the expected diameter): a ball resting
in view when the clip starts would otherwise become the "static" scene, and the registration would
follow it as it begins to move — on a plain background it can be the only texture there is. Each
frame starts from the whole-pixel shift that
maximises the summed correlation of all patches near the previous shift, so a tap that jumps
the view by several pixels, or a ruler whose ticks repeat, cannot lead the fine alignment into a
wrong minimum.

Coordinates: displayed frame, x right, y down, px.
"""

from __future__ import annotations

from dataclasses import dataclass

import cv2
import numpy as np
from numpy.typing import NDArray

__all__ = ["Registration", "Stabilizer"]

# Gauss–Newton stops when the update is below this (px) — well under the centre precision.
_STEP_TOL_PX = 0.01
_MAX_ITER = 8
# A patch whose normalised residual exceeds this multiple of the median residual is dropped.
_OUTLIER_FACTOR = 4.0
# Information (Σ of the squared smoothed gradient, DN²) an axis needs outside its best patch to be
# registered at all; a flat 32-px patch with 2 DN noise has ~500, a ruler tick patch ~10⁴.
_MIN_AXIS_INFO = 2000.0
# A patch that is an outlier in this many consecutive frames is not used again.
_RETIRE_AFTER = 10
# Gaussian pre-smoothing (σ, px) of the patches before sub-pixel interpolation, and the border
# (px) taken around a patch for it.
_PRESMOOTH_PX = 1.0
_SMOOTH_BORDER = 8
# Every frame first searches whole-pixel shifts this far around the previous one (a tap on the
# phone moves the view several px between two frames); a wider search follows when that fails.
_NEAR_SEARCH_PX = 8.0
# Residual (relative to its running typical value) that triggers those searches; a jump found
# by them is taken only if it lowers the residual below _JUMP_GAIN × the current one.
_RAISED_FACTOR = 1.5
# Beyond this multiple of the typical residual a frame counts as not registered.
_LOST_FACTOR = 4.0
# Smallest typical residual assumed (relative units): codec-copied static blocks give ~0.
_RESID_FLOOR = 0.05
_JUMP_GAIN = 0.75
# Penalty per px of distance from the previous shift on the summed correlation (per patch):
# a peak 10 px away must correlate 0.1 better to win, so repeated ticks cannot pull the shift.
_JUMP_PENALTY = 0.01


def _small_median(a: NDArray[np.float64]) -> float:
    """numpy.median of a handful of values, without its per-call overhead (called ~5× a frame)."""
    v = sorted(a.tolist())
    n = len(v)
    return 0.5 * (v[(n - 1) // 2] + v[n // 2]) if n else float("nan")


@dataclass(frozen=True)
class Registration:
    """Shift of one frame relative to the scene.

    Attributes
    ----------
    dx_px, dy_px : float
        Translation of the frame: a static scene point at ``p`` appears at ``p + (dx, dy)``, px.
    ok : bool
        False when the frame could not be registered (the previous shift was kept).
    n_patches : int
        Number of patches that agreed.
    residual : float
        RMS residual after alignment relative to the patches' grey-level spread (0 = perfect).
    """

    dx_px: float
    dy_px: float
    ok: bool
    n_patches: int
    residual: float


class Stabilizer:
    """Registers frames to a reference frame by a translation.

    Parameters
    ----------
    reference : ndarray of shape (H, W), uint8
        The reference frame; its pixel grid defines the scene frame.
    patch_px : int
        Side of the square registration patches, px.
    max_patches : int
        Number of patches chosen (half for horizontal and half for vertical structure).
    max_shift_px : float
        Largest camera motion expected; patches keep this far from the frame border and
        jumps up to this size are recovered, px.
    avoid_diameter_px : float or None
        Expected diameter of the sphere in the picture, px: compact dark or bright blobs of about
        this size in the reference frame (a ball at rest in view) get no patch. None: no such
        check.

    Attributes
    ----------
    centres : ndarray of shape (n, 2)
        Patch centres (x, y) in the scene frame, px.
    weak_axes : list of str
        "x" and/or "y" when the scene has too little structure to register that direction
        (structure in one patch only does not count); such an axis is held at zero shift.
    avoided : list of (x0, y0, x1, y1)
        Boxes of sphere-like blobs in the reference frame that got no patch, px.
    """

    def __init__(self, reference: NDArray[np.uint8], *, patch_px: int = 32, max_patches: int = 8,
                 max_shift_px: float = 30.0, avoid_diameter_px: float | None = None) -> None:
        if reference.ndim != 2:
            raise ValueError(f"reference: expected a 2-D grey image, got shape {reference.shape}")
        self.patch_px = int(patch_px)
        self.max_shift_px = float(max_shift_px)
        self._ref_image = reference.astype(np.float32)
        self.avoided = _sphere_like_boxes(reference, avoid_diameter_px) if avoid_diameter_px else []
        # patches are chosen on the picture they will be matched on: the smoothing removes
        # gratings too fine to register (a mm ruler at 2 px/mm)
        self.centres = np.round(self._choose_patches(
            cv2.GaussianBlur(self._ref_image, (0, 0), _PRESMOOTH_PX), max_patches))
        # top-left pixel of each patch (patch pixels sit at centre − (P − 1)/2 + k)
        self._corner = np.floor(self.centres - (self.patch_px - 1) / 2.0).astype(int)
        self._frac = float((self.patch_px - 1) / 2.0 % 1.0)     # same for every patch and axis
        self._mosaic = np.empty((0, self.patch_px + 2 * _SMOOTH_BORDER), np.float32)
        self._prepare()
        self._shift = np.zeros(2)
        self._typical_resid = float("nan")
        self._active = np.ones(len(self.centres), bool)
        self._bad_count = np.zeros(len(self.centres), int)

    # ------------------------------------------------------------------ patch choice
    def _choose_patches(self, ref: NDArray[np.float32], max_patches: int) -> NDArray[np.float64]:
        """Textured patches, preferring those whose content does not repeat nearby."""
        h, w = ref.shape
        p = self.patch_px
        f = max(1, p // 8)
        small = cv2.resize(ref, (w // f, h // f), interpolation=cv2.INTER_AREA)
        gx = cv2.Sobel(small, cv2.CV_32F, 1, 0, ksize=3)
        gy = cv2.Sobel(small, cv2.CV_32F, 0, 1, ksize=3)
        k = max(3, p // f)
        exx = cv2.boxFilter(gx * gx, -1, (k, k))
        eyy = cv2.boxFilter(gy * gy, -1, (k, k))
        margin = int(np.ceil((p / 2 + self.max_shift_px + 2) / f))
        valid = np.zeros(small.shape, bool)
        if small.shape[0] > 2 * margin and small.shape[1] > 2 * margin:
            valid[margin:-margin, margin:-margin] = True
        half = p / 2.0 + 2.0
        for bx0, by0, bx1, by1 in self.avoided:  # no patch centre whose patch touches the box
            valid[max(0, int((by0 - half) // f)): max(0, int(np.ceil((by1 + half) / f))),
                  max(0, int((bx0 - half) // f)): max(0, int(np.ceil((bx1 + half) / f)))] = False
        sep = p / f
        chosen: list[tuple[float, float]] = []
        per_axis = max(1, max_patches // 2)
        for axis, energy in ((0, exx + 0.5 * np.minimum(exx, eyy)), (1, eyy + 0.5 * np.minimum(exx, eyy))):
            e = np.where(valid, energy, -1.0)
            noise_floor = 4.0 * float(np.median(energy)) + 1e-3
            pool: list[tuple[bool, float, float, float]] = []      # (repeats, -energy, x, y)
            for _ in range(3 * per_axis):
                iy, ix = np.unravel_index(int(np.argmax(e)), e.shape)
                if e[iy, ix] <= noise_floor:
                    break
                cx, cy = (ix + 0.5) * f - 0.5, (iy + 0.5) * f - 0.5
                pool.append((not self._unique_along(ref, cx, cy, axis), -float(e[iy, ix]), cx, cy))
                e[max(0, int(iy - sep)): int(iy + sep + 1), max(0, int(ix - sep)): int(ix + sep + 1)] = -1.0
            mine: list[tuple[float, float]] = []
            # first pass spreads the patches across the picture (another wall, the ruler, a
            # mark), so one occluded region cannot take them all; the second fills up
            for spread in (True, False):
                for _, _, cx, cy in sorted(pool):
                    if len(mine) >= per_axis:
                        break
                    if spread and any(abs(cx - ox) < 2 * p for ox, _ in mine):
                        continue
                    if all(abs(cx - ox) >= p or abs(cy - oy) >= p for ox, oy in chosen):
                        chosen.append((float(cx), float(cy)))
                        mine.append((float(cx), float(cy)))
        return np.array(chosen, dtype=np.float64).reshape(-1, 2)

    def _unique_along(self, ref: NDArray[np.float32], cx: float, cy: float, axis: int) -> bool:
        """The patch at (cx, cy) matches its surroundings only at zero shift along ``axis``.

        ``axis`` 0 = x, 1 = y. A vertical wall edge is unique along x; the liquid surface along
        y; ruler ticks along neither.
        """
        p = self.patch_px
        side = p + 2 * int(np.ceil(self.max_shift_px))
        patch = cv2.getRectSubPix(ref, (p, p), (float(cx), float(cy)))
        region = cv2.getRectSubPix(ref, (side, side), (float(cx), float(cy)))
        score = cv2.matchTemplate(region, patch, cv2.TM_CCOEFF_NORMED)
        c = score.shape[0] // 2
        off = np.abs(np.arange(score.shape[0]) - c)
        far = np.broadcast_to(off[None, :] > 3 if axis == 0 else off[:, None] > 3, score.shape)
        return bool(score[far].max() < 0.7)

    def _prepare(self) -> None:
        p = self.patch_px
        refs, gxs, gys = [], [], []
        smooth = cv2.GaussianBlur(self._ref_image, (0, 0), _PRESMOOTH_PX)
        for cx, cy in self.centres:
            r = cv2.getRectSubPix(smooth, (p + 2, p + 2), (float(cx), float(cy)))
            refs.append(r[1:-1, 1:-1])
            gxs.append(0.5 * (r[1:-1, 2:] - r[1:-1, :-2]))
            gys.append(0.5 * (r[2:, 1:-1] - r[:-2, 1:-1]))
        n = len(self.centres)
        self._ref = np.array(refs, np.float32).reshape(n, p, p)
        self._gx = np.array(gxs, np.float32).reshape(n, p, p)
        self._gy = np.array(gys, np.float32).reshape(n, p, p)
        ref, gx, gy = self._ref, self._gx, self._gy
        n_pix = float(p * p)
        s_r = ref.sum(axis=(1, 2))
        s_rr = (ref * ref).sum(axis=(1, 2))
        det = s_rr * n_pix - s_r ** 2
        det = np.where(np.abs(det) < 1e-6, 1e-6, det)
        # per patch: photometric block C = [[Σr², Σr], [Σr, N]]⁻¹, coupling B, geometric block A
        self._ci = np.stack([np.stack([n_pix / det, -s_r / det], -1),
                             np.stack([-s_r / det, s_rr / det], -1)], -2)
        self._b = np.stack([np.stack([(gx * ref).sum(axis=(1, 2)), gx.sum(axis=(1, 2))], -1),
                            np.stack([(gy * ref).sum(axis=(1, 2)), gy.sum(axis=(1, 2))], -1)], -2)
        sxx = (gx * gx).sum(axis=(1, 2))
        syy = (gy * gy).sum(axis=(1, 2))
        sxy = (gx * gy).sum(axis=(1, 2))
        a = np.stack([np.stack([sxx, sxy], -1), np.stack([sxy, syy], -1)], -2)
        self._red = a - self._b @ self._ci @ np.swapaxes(self._b, 1, 2)   # Schur complement
        self._ref_std = np.maximum(ref.reshape(n, -1).std(axis=1), 1.0) if n else np.zeros(0)
        # rows: ref, 1, gx, gy — one batched product gives every sum an iteration needs
        self._basis = np.stack([ref.reshape(n, p * p), np.ones((n, p * p), np.float32),
                                gx.reshape(n, p * p), gy.reshape(n, p * p)], axis=1)
        # An axis is registered only if more than one patch informs it: structure along it in a
        # single patch (the liquid surface, where the sphere enters) can be swept away by what
        # passes through that patch. A weak axis is held at zero shift.
        info = np.array([[self._red[i, a, a] for a in (0, 1)] for i in range(n)]).reshape(n, 2)
        beyond_best = info.sum(axis=0) - (info.max(axis=0) if n else 0.0)
        self._fixed = beyond_best < _MIN_AXIS_INFO
        self.weak_axes = [ax for ax, weak in zip(("x", "y"), self._fixed) if weak]

    # ------------------------------------------------------------------ registration
    def _smoothed_regions(self, luma: NDArray[np.uint8], shift: NDArray[np.float64],
                          idx: NDArray[np.intp]) -> tuple[NDArray[np.float32], NDArray[np.float64]]:
        """Gaussian-smoothed frame regions around the patches, once per frame.

        Interpolating sharp structure (1-px ruler ticks) bilinearly smooths it by an amount that
        depends on the sub-pixel phase, which biases the shift by up to ~0.1 px; smoothing first
        (σ = _PRESMOOTH_PX, the reference gets the same) makes the interpolation nearly exact.
        The regions are stacked into one mosaic and smoothed with one call; patch centres are
        whole pixels, so every patch has the same sub-pixel offset in its region.

        Returns
        -------
        stack : ndarray of shape (n, S, S), float32
            Smoothed regions, S = patch + 2 × border.
        origin : ndarray of shape (2,)
            Frame shift at which a patch starts exactly at (border, border) of its region.
        """
        p, b = self.patch_px, _SMOOTH_BORDER
        side = p + 2 * b
        n = len(idx)
        if self._mosaic.shape[0] < n * side:
            self._mosaic = np.empty((n * side, side), np.float32)
        mosaic = self._mosaic[: n * side]
        base = np.floor(shift).astype(int)
        h, w = luma.shape
        for j, i in enumerate(idx):
            x0 = int(self._corner[i, 0]) + base[0] - b
            y0 = int(self._corner[i, 1]) + base[1] - b
            if 0 <= x0 and 0 <= y0 and x0 + side <= w and y0 + side <= h:
                mosaic[j * side:(j + 1) * side] = luma[y0:y0 + side, x0:x0 + side]
            else:
                mosaic[j * side:(j + 1) * side] = cv2.getRectSubPix(
                    luma, (side, side), (x0 + (side - 1) / 2.0, y0 + (side - 1) / 2.0))
        smooth = cv2.GaussianBlur(mosaic, (0, 0), _PRESMOOTH_PX)
        return smooth.reshape(n, side, side), base.astype(np.float64)

    def _sample(self, stack: NDArray[np.float32], origin: NDArray[np.float64],
                shift: NDArray[np.float64]) -> NDArray[np.float32]:
        """All patches at a sub-pixel shift, bilinear in the smoothed regions: (n, P·P)."""
        p, b = self.patch_px, _SMOOTH_BORDER
        u = b + self._frac + shift[0] - origin[0]
        v = b + self._frac + shift[1] - origin[1]
        iu, iv = int(np.floor(u)), int(np.floor(v))
        fu, fv = np.float32(u - iu), np.float32(v - iv)
        a = stack[:, iv:iv + p + 1, iu:iu + p + 1]
        top = a[:, :p, :p] * (1 - fu) + a[:, :p, 1:] * fu
        bottom = a[:, 1:, :p] * (1 - fu) + a[:, 1:, 1:] * fu
        return (top * (1 - fv) + bottom * fv).reshape(len(stack), -1)

    def _gauss_newton(self, luma: NDArray[np.uint8], shift: NDArray[np.float64],
                      idx: NDArray[np.intp]) -> tuple[NDArray[np.float64], NDArray[np.float64]]:
        """Iterate the shared translation; returns (shift, per-patch normalised residual)."""
        ci, bmat, red, basis = self._ci[idx], self._b[idx], self._red[idx], self._basis[idx]
        # Tikhonov term (keeps the 2×2 solve regular) plus the hold on weak axes
        red_sum = red.sum(axis=0)
        reg = 1e-6 * max(red_sum[0, 0] + red_sum[1, 1], 1.0)
        hold = (reg + self._fixed[0] * 1e12, reg + self._fixed[1] * 1e12)
        stack, origin = self._smoothed_regions(luma, shift, idx)
        for it in range(_MAX_ITER + 1):
            if float(np.abs(shift - origin - 0.5).max()) > _SMOOTH_BORDER - 4:
                stack, origin = self._smoothed_regions(luma, shift, idx)
            cur = self._sample(stack, origin, shift)
            sums = np.einsum("nkp,np->nk", basis, cur)         # Σ cur·ref, Σ cur, Σ cur·gx, Σ cur·gy
            # Model per patch: cur ≈ g·ref + b − ∇ref·u with u = g·δ (δ = remaining shift), linear
            # in (u, g, b). Eliminating (g, b) leaves red·u = red_rhs per patch; δ is shared.
            photo = np.einsum("nij,nj->ni", ci, sums[:, :2])                  # (g, b) at u = 0
            if it == _MAX_ITER:
                break
            red_rhs = np.einsum("nij,nj->ni", bmat, photo) - sums[:, 2:]
            gains = np.maximum(photo[:, 0], 1e-3)
            (a, b), (c, d) = np.einsum("n,nij->ij", gains ** 2, red).tolist()
            a, d = a + hold[0], d + hold[1]
            r0, r1 = (gains @ red_rhs).tolist()
            det = a * d - b * c                     # 2×2 solve by Cramer's rule (a numpy call costs more)
            step = np.array([(d * r0 - b * r1) / det, (a * r1 - c * r0) / det])
            shift = shift + step
            if float(np.abs(step).max()) < _STEP_TOL_PX:
                break       # the residual of this sample is that of the final shift to ~1 %
        fit = photo[:, 0, None] * basis[:, 0] + photo[:, 1, None]
        rms = np.sqrt(((cur - fit) ** 2).mean(axis=1))
        resid = rms / (np.maximum(np.abs(photo[:, 0]), 1e-3) * self._ref_std[idx])
        return shift, resid

    def _coarse(self, luma: NDArray[np.uint8], idx: NDArray[np.intp], around: NDArray[np.float64],
                radius_px: float) -> tuple[NDArray[np.float64], float] | None:
        """Shift (to ~0.1 px) maximising the summed correlation of all patches near ``around``.

        Summing the normalised correlation maps before taking the peak resolves what single
        patches cannot: a wall edge fixes only x, ruler ticks repeat, a mark or the liquid
        surface fixes y. Returns (shift, mean correlation at the peak) or None.
        """
        p = self.patch_px
        r = int(np.ceil(radius_px))
        side = p + 2 * r
        ax, ay = int(round(around[0])), int(round(around[1]))
        total = None
        for i in idx:
            cx, cy = self.centres[i]
            region = cv2.getRectSubPix(luma, (side, side), (float(cx + ax), float(cy + ay)))
            score = cv2.matchTemplate(region.astype(np.float32), self._ref[i], cv2.TM_CCOEFF_NORMED)
            total = score if total is None else total + score
        if total is None:
            return None
        # equal peaks (repeating ticks) go to the one nearest the previous shift
        off = np.arange(total.shape[0], dtype=np.float32) - r
        total = total - _JUMP_PENALTY * len(idx) * np.sqrt(off[None, :] ** 2 + off[:, None] ** 2)
        _, best, _, (bx, by) = cv2.minMaxLoc(total)
        frac = [0.0, 0.0]
        for k, (lo, mid, hi) in enumerate((
                (total[by, bx - 1], best, total[by, bx + 1]) if 0 < bx < total.shape[1] - 1 else (0, 0, 0),
                (total[by - 1, bx], best, total[by + 1, bx]) if 0 < by < total.shape[0] - 1 else (0, 0, 0))):
            den = lo - 2.0 * mid + hi
            if den < 0:
                frac[k] = float(np.clip(0.5 * (lo - hi) / den, -0.5, 0.5))
        found = np.array([ax + bx - r + frac[0], ay + by - r + frac[1]], float)
        return np.where(self._fixed, self._shift, found), float(best) / len(idx)

    def register(self, luma: NDArray[np.uint8], *,
                 exclude_boxes: list[tuple[float, float, float, float]] = ()) -> Registration:
        """Shift of a frame relative to the reference.

        Parameters
        ----------
        luma : ndarray of shape (H, W), uint8
            The frame, displayed orientation.
        exclude_boxes : list of (x0, y0, x1, y1)
            Frame-coordinate boxes covering moving objects; patches overlapping them are not
            used in this frame, px.

        Returns
        -------
        Registration
            The shift (the previous one is kept, with ``ok=False``, when nothing registers).
        """
        if len(self.centres) == 0:  # no structure at all: both axes weak, held at zero
            return Registration(0.0, 0.0, True, 0, float("nan"))
        half = self.patch_px / 2.0 + 2.0
        px, py = (self.centres + self._shift).T
        use = self._active.copy()
        for bx0, by0, bx1, by1 in exclude_boxes:
            use &= ~((px + half > bx0) & (px - half < bx1) & (py + half > by0) & (py - half < by1))
        idx = np.flatnonzero(use)
        if idx.size == 0:
            return Registration(float(self._shift[0]), float(self._shift[1]), False, 0, float("nan"))
        shift, resid = self._gauss_newton(luma, self._shift.copy(), idx)
        typical = max(self._typical_resid if np.isfinite(self._typical_resid) else _small_median(resid),
                      _RESID_FLOOR)
        # a raised residual means the view jumped (a tap) or fell into a wrong minimum (repeating
        # ticks): search whole-pixel shifts near the previous one; a jump found there (or no
        # fix) is checked by a search over the whole range, where a mark or the liquid surface
        # decides between repeated ticks
        if _small_median(resid) > _RAISED_FACTOR * typical:
            med = _small_median(resid)
            found = self._coarse(luma, idx, self._shift, _NEAR_SEARCH_PX)
            if found is not None:
                shift2, resid2 = self._gauss_newton(luma, found[0], idx)
                if _small_median(resid2) < _JUMP_GAIN * med:
                    shift, resid = shift2, resid2
            if _small_median(resid) > _RAISED_FACTOR * typical or \
                    float(np.abs(shift - self._shift).max()) > 2.0:
                found = self._coarse(luma, idx, self._shift, self.max_shift_px)
                if found is not None and float(np.abs(found[0] - shift).max()) > 1.0:
                    shift2, resid2 = self._gauss_newton(luma, found[0], idx)
                    if float(np.mean(resid2)) < float(np.mean(resid)):
                        shift, resid = shift2, resid2
        # drop patches that do not fit (a hand in front, a passing object) and solve again; a
        # patch that never fits any more (the reference frame held a passing object there) is
        # retired
        med = _small_median(resid)
        good = resid <= max(_OUTLIER_FACTOR * med, 2.0 * typical)
        self._bad_count[idx[~good]] += 1
        self._bad_count[idx[good]] = 0
        if 2 <= good.sum() < idx.size:
            idx = idx[good]
            shift, resid = self._gauss_newton(luma, shift, idx)
        retire = self._bad_count >= _RETIRE_AFTER
        if retire.any() and (~retire & self._active).sum() >= 2:
            self._active &= ~retire
        med = _small_median(resid)
        ok = bool(np.isfinite(shift).all() and med < _LOST_FACTOR * typical
                  and float(np.abs(shift).max()) <= 2 * self.max_shift_px)
        if ok:
            self._shift = shift
        # the typical residual follows slow changes (codec quality drifts along a clip); one bad
        # frame moves it by at most a little
        med_c = min(med, 2.0 * typical) if np.isfinite(med) else typical
        self._typical_resid = med_c if not np.isfinite(self._typical_resid) else (
            0.9 * self._typical_resid + 0.1 * med_c)
        return Registration(float(self._shift[0]), float(self._shift[1]), ok, int(idx.size), med)


# Sphere-like blobs in the reference frame: extent within this range of the expected diameter
# (the tube magnifies sideways by up to ~1.35; defocus adds a little) and this much of their
# bounding box filled (a disc fills π/4 ≈ 0.79, a square 1), with at most this fraction of a
# ring around it above the contrast level.
_BLOB_SIZE_RANGE = (0.6, 1.7)
_BLOB_FILL_RANGE = (0.6, 0.92)
_BLOB_RING_FILL = 0.05
# Contrast a blob needs, in units of the robust spread of the top-hat image, and at least (DN).
_BLOB_SIGMA = 6.0
_BLOB_MIN_DN = 8.0


def _uint8_mad(image: NDArray[np.uint8]) -> float:
    """Median absolute deviation from the median of a uint8 image, equal to numpy.median's
    (middle values averaged) but from one 256-bin histogram: ~1.3 ms for a 1280 × 720 image
    instead of ~14."""
    counts = np.bincount(image.ravel(), minlength=256)
    cum = np.cumsum(counts)
    n = int(cum[-1])

    def middle(sorted_values: NDArray[np.float64], cum_counts: NDArray[np.int64]) -> float:
        lo = sorted_values[np.searchsorted(cum_counts, (n - 1) // 2 + 1)]
        hi = sorted_values[np.searchsorted(cum_counts, n // 2 + 1)]
        return 0.5 * (float(lo) + float(hi))

    levels = np.arange(256, dtype=np.float64)
    dev = np.abs(levels - middle(levels, cum))
    order = np.argsort(dev, kind="stable")
    return middle(dev[order], np.cumsum(counts[order]))


def _sphere_like_boxes(reference: NDArray[np.uint8], diameter_px: float
                       ) -> list[tuple[float, float, float, float]]:
    """Bounding boxes (x0, y0, x1, y1, px) of compact blobs of about ``diameter_px``.

    A morphological top-hat with a disc a little larger than the sphere keeps dark (and bright)
    structure narrower than the disc; of its connected pieces, those as tall as they are wide, of
    the sphere's size and filling their box like a disc, are sphere-like. Lines (tube walls, ruler
    ticks, marks) are long in one direction and are not. Computed on a copy scaled so that the
    sphere is ~12 px across.
    """
    if not (np.isfinite(diameter_px) and diameter_px > 0):
        return []
    h, w = reference.shape
    f = max(1.0, diameter_px / 12.0)
    small = cv2.resize(reference, (max(1, int(round(w / f))), max(1, int(round(h / f)))),
                       interpolation=cv2.INTER_AREA) if f > 1.0 else reference
    d = diameter_px / f
    k = 2 * int(np.ceil(_BLOB_SIZE_RANGE[1] * d / 2.0)) + 1
    disc = cv2.getStructuringElement(cv2.MORPH_ELLIPSE, (k, k))
    boxes = []
    for op in (cv2.MORPH_BLACKHAT, cv2.MORPH_TOPHAT):       # dark, then bright blobs
        hat = cv2.morphologyEx(small, op, disc, borderType=cv2.BORDER_REPLICATE)
        spread = 1.4826 * _uint8_mad(hat)
        level = max(_BLOB_MIN_DN, _BLOB_SIGMA * spread)
        mask = (hat > level).astype(np.uint8)
        n, labels, stats, _ = cv2.connectedComponentsWithStats(mask, connectivity=8)
        lo, hi = _BLOB_SIZE_RANGE[0] * d, _BLOB_SIZE_RANGE[1] * d
        # pieces no larger than a sphere either way: what makes a blob one of many (ruler ticks,
        # texture); longer structure (the liquid surface, a wall, a mark) may pass close by
        small_piece = np.maximum(stats[:, cv2.CC_STAT_WIDTH], stats[:, cv2.CC_STAT_HEIGHT]) <= hi
        small_piece[0] = False
        clutter = small_piece[labels]
        for x, y, bw, bh, area in stats[1:]:
            if not (lo <= bw <= hi and lo <= bh <= hi
                    and _BLOB_FILL_RANGE[0] * bw * bh <= area <= _BLOB_FILL_RANGE[1] * bw * bh):
                continue
            # alone among its kind: a ring half a diameter wide around it holds almost no other
            # small piece (a tick of a ruler or a piece of a textured surface has neighbours)
            r = int(np.ceil(0.5 * d))
            ring = clutter[max(0, y - r): y + bh + r, max(0, x - r): x + bw + r]
            if float(ring.sum()) - area <= _BLOB_RING_FILL * (ring.size - bw * bh):
                boxes.append((x * f, y * f, (x + bw) * f, (y + bh) * f))
    return boxes
