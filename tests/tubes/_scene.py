"""A small drawn rack scene for the tubes tests (invented scenes, not the studio).

Everything is drawn upright in "rack" coordinates, then warped by one
homography (camera roll about the optical axis and a camera pitch/yaw, i.e. a
pure rotation homography K·R·K⁻¹, Hartley & Zisserman 2004, *Multiple View
Geometry*, 2nd ed., eq. 8.13), so the truth boxes are the warped outlines.

Looks (simplified, invented for the tests): a light paper backdrop, plain or
with horizontal dark bands; each tube a cylinder whose walls show as dark thin
vertical lines (refraction, common practice) with a bright specular streak
inside; contents coloured, colourless, cloudy, with a pellet, or empty; a
dark meniscus line curving up at the walls; a round (hemispherical) bottom; a
rack with a front bar that hides part of every tube, a base and two end posts.
Linear-light compositing, encoded to sRGB (IEC 61966-2-1) as uint8.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field

import numpy as np

from tubevision.colorimetry import linear_to_srgb

CONTENTS = {
    # name: (transmittance per channel over a full chord, scatter veil, pellet)
    "colourless": ((0.985, 0.985, 0.985), 0.0, None),
    "blue": ((0.25, 0.55, 0.92), 0.0, None),
    "yellow": ((0.95, 0.85, 0.25), 0.0, None),
    "red": ((0.9, 0.2, 0.25), 0.0, None),
    "cloudy": ((0.6, 0.6, 0.6), 0.35, None),
    "pellet": ((0.97, 0.97, 0.97), 0.0, (0.9, 0.85, 0.2)),
    "dark_pellet": ((0.9, 0.9, 0.95), 0.0, (0.05, 0.05, 0.05)),
    "empty": None,
}


@dataclass(frozen=True)
class Scene:
    contents: tuple[str, ...] = ("colourless", "blue", "empty", "pellet")
    rows: int = 1                    # 1 or 2 rack rows (tubes split in order)
    size: tuple[int, int] = (640, 480)  # output (width, height) px
    tube_w: float = 34.0             # outer tube width (px) in the upright scene
    tube_h: float = 200.0            # rim to bottom (px)
    pitch: float = 1.5               # slot pitch / tube width
    banded: bool = False
    band_px: float = 10.0
    roll_deg: float = 0.0
    tilt_deg: float = 0.0            # camera pitch (keystone), degrees
    yaw_deg: float = 0.0
    fill: float = 0.6                # liquid height / tube height
    rack: bool = True
    card: bool = False
    noise: float = 0.006
    seed: int = 0
    extra: dict = field(default_factory=dict)


def _homography(sc: Scene) -> np.ndarray:
    w, h = sc.size
    f = 1.1 * max(w, h)
    K = np.array([[f, 0, w / 2], [0, f, h / 2], [0, 0, 1.0]])
    a, b, c = (math.radians(v) for v in (sc.tilt_deg, sc.yaw_deg, sc.roll_deg))
    Rx = np.array([[1, 0, 0], [0, math.cos(a), -math.sin(a)], [0, math.sin(a), math.cos(a)]])
    Ry = np.array([[math.cos(b), 0, math.sin(b)], [0, 1, 0], [-math.sin(b), 0, math.cos(b)]])
    Rz = np.array([[math.cos(c), -math.sin(c), 0], [math.sin(c), math.cos(c), 0], [0, 0, 1]])
    H = K @ Rz @ Ry @ Rx @ np.linalg.inv(K)
    H = H / H[2, 2]
    # re-aim at the scene's centre, as a person framing the rack would
    cx, cy = _warp_pts(H, np.array([[w / 2, h / 2]]))[0]
    T = np.array([[1, 0, w / 2 - cx], [0, 1, h / 2 - cy], [0, 0, 1.0]])
    return T @ H


def _warp_pts(H, pts):
    p = np.c_[pts, np.ones(len(pts))] @ H.T
    return p[:, :2] / p[:, 2:3]


def render_scene(sc: Scene):
    """Render; returns (uint8 image (H, W, 3), truth dict).

    ``truth["tubes"]``: one dict per tube in reading order with ``bbox``
    (half-open, warped outline), ``liquid_top`` (row of the meniscus on the
    axis, None for empty), ``inner_bottom`` (row of the inside bottom on the
    axis), ``row``.
    """
    import cv2

    rng = np.random.default_rng(sc.seed)  # seed fixes the noise
    W, Hh = sc.size
    n = len(sc.contents)
    yy, xx = np.mgrid[0:Hh, 0:W].astype(np.float32)
    back = np.full((Hh, W, 3), 0.82, np.float32)
    back *= (1.0 - 0.08 * (xx / W))[..., None]          # gentle light fall-off
    if sc.banded:
        dark = (np.floor(yy / sc.band_px) % 2) == 1
        back[dark] = 0.035
    img = back.copy()
    r = sc.tube_w / 2
    wall = max(1.5, 0.07 * sc.tube_w)
    per_row = [n] if sc.rows == 1 else [math.ceil(n / 2), n - math.ceil(n / 2)]
    pitch = sc.pitch * sc.tube_w
    truth = []
    k = 0
    row_gap = sc.tube_h * 1.15
    total_h = sc.tube_h + (sc.rows - 1) * row_gap
    for ri, count in enumerate(per_row):
        top = (Hh - total_h) / 2 + ri * row_gap
        span = count * pitch
        left = (W - span) / 2 + pitch / 2
        rim, bottom = top, top + sc.tube_h
        centre_row = bottom - r                      # hemisphere centre
        if sc.rack:
            bar0, bar1 = top + 0.25 * sc.tube_h, top + 0.38 * sc.tube_h
            rx0, rx1 = left - pitch * 0.9, left + span - pitch * 0.1
        for j in range(count):
            name = sc.contents[k]
            cx = left + j * pitch
            d = xx - cx
            ins_out = ((np.abs(d) <= r) & (yy >= rim) & (yy <= centre_row)) | \
                      ((d ** 2 + (yy - centre_row) ** 2 <= r ** 2) & (yy > centre_row))
            rin = r - wall
            ins_in = ((np.abs(d) <= rin) & (yy >= rim) & (yy <= centre_row)) | \
                     ((d ** 2 + (yy - centre_row) ** 2 <= rin ** 2) & (yy > centre_row))
            wallm = ins_out & ~ins_in
            u = np.clip(d / rin, -1, 1)
            chord = np.sqrt(np.clip(1 - u ** 2, 0, 1))
            # round bottom: chord shrinks
            below = yy > centre_row
            hb = np.sqrt(np.clip(rin ** 2 - (yy - centre_row) ** 2, 0, None))
            chord = np.where(below, np.sqrt(np.clip(hb ** 2 - d ** 2, 0, None)) / rin, chord)
            inner_bottom = centre_row + rin
            c = CONTENTS[name]
            tile = img
            tile[ins_in] *= 0.95
            lt = None
            if c is not None:
                trans, veil, pellet = c
                lt = rim + (1 - sc.fill) * sc.tube_h
                men = lt - 0.12 * rin * (u ** 4)      # meniscus curves up at the wall
                liq = ins_in & (yy >= men)
                T = np.asarray(trans, np.float32) ** chord[..., None]
                tile[liq] = tile[liq] * T[liq] + veil * 0.8 * chord[liq][:, None]
                ml = ins_in & (yy >= men - 1.6) & (yy < men + 0.6)
                tile[ml] *= 0.35
                if pellet is not None:
                    ph = 0.5 * sc.tube_w
                    pm = ins_in & (yy >= inner_bottom - ph)
                    tile[pm] = np.asarray(pellet, np.float32) * 0.9
            tile[wallm] = tile[wallm] * 0.3 + 0.01
            # specular streaks
            s1 = ins_in & (np.abs(d + 0.55 * rin) < 0.06 * rin + 0.5) & (yy < centre_row)
            tile[s1] = np.minimum(tile[s1] + 0.5, 1.0)
            # rim lip
            lip = (np.abs(d) <= r * 1.06) & (np.abs(yy - rim) < 1.2)
            tile[lip] = tile[lip] * 0.4
            # truth outline: warped capsule points
            th = np.linspace(0, math.pi, 40)
            outline = np.r_[[[cx - r * 1.06, rim - 1], [cx + r * 1.06, rim - 1]],
                            np.c_[cx + r * np.cos(th), centre_row + r * np.sin(th)]]
            truth.append(dict(row=ri, outline=outline,
                              liquid_top=None if lt is None else (cx, lt),
                              inner_bottom=(cx, inner_bottom), axis=((cx, rim), (cx, bottom))))
            k += 1
        if sc.rack:
            rackc = np.asarray([0.18, 0.22, 0.30], np.float32)
            m = (yy >= bar0) & (yy < bar1) & (xx >= rx0) & (xx < rx1)
            img[m] = rackc
            post_w = 0.6 * r
            for px0 in (rx0, rx1 - post_w):
                m = (xx >= px0) & (xx < px0 + post_w) & (yy >= bar0) & (yy < bottom + 10)
                img[m] = rackc * 1.2
            m = (yy >= bottom + 2) & (yy < bottom + 10) & (xx >= rx0) & (xx < rx1)
            img[m] = rackc * 0.9
    quad = None
    if sc.card:
        cw, ch = 0.22 * W, 0.14 * Hh
        x0c, y0c = W - cw - 6, Hh - ch - 4
        m = (xx >= x0c) & (xx < x0c + cw) & (yy >= y0c) & (yy < y0c + ch)
        img[m] = 0.9
        for i in range(6):
            for jj in range(3):
                pm = ((xx >= x0c + 4 + i * cw / 6) & (xx < x0c + i * cw / 6 + cw / 6 - 2)
                      & (yy >= y0c + 4 + jj * ch / 3) & (yy < y0c + jj * ch / 3 + ch / 3 - 2))
                img[pm] = rng.uniform(0.05, 0.9, 3)
        quad = np.array([[x0c, y0c], [x0c + cw, y0c], [x0c + cw, y0c + ch], [x0c, y0c + ch]])
    H = _homography(sc)
    img = cv2.warpPerspective(img, H, (W, Hh), flags=cv2.INTER_LINEAR, borderMode=cv2.BORDER_REPLICATE)
    img = img + rng.normal(0, sc.noise, img.shape).astype(np.float32)
    out = np.round(linear_to_srgb(np.clip(img, 0, 1)) * 255).astype(np.uint8)
    tubes = []
    for t in truth:
        o = _warp_pts(H, t["outline"])
        x0, y0 = np.floor(o.min(axis=0)).astype(int)
        x1, y1 = np.ceil(o.max(axis=0)).astype(int) + 1
        x0, y0, x1, y1 = max(0, x0), max(0, y0), min(W, x1), min(Hh, y1)
        lt = None if t["liquid_top"] is None else float(_warp_pts(H, np.array([t["liquid_top"]]))[0, 1])
        ib = float(_warp_pts(H, np.array([t["inner_bottom"]]))[0, 1])
        a = _warp_pts(H, np.array(t["axis"]))
        tubes.append(dict(row=t["row"], bbox=(int(x0), int(y0), int(x1), int(y1)), liquid_top=lt,
                          inner_bottom=ib, axis=a))
    q = None if quad is None else _warp_pts(H, quad)
    return out, dict(tubes=tubes, card_quad=q)
