"""Deterministic demo clips of our own: parcels in a sorting hall, seen from above or from the side.

Three scenes, each a stack of flat layers (floor, conveyor belts, parcels, carts, signs) whose
positions over time are affine maps known in closed form, so the true motion of every pixel is
known exactly (up to the resampling accuracy noted below):

``parcels_pan``
    Camera panning over two conveyor belts running in opposite directions at different speeds,
    parcels with printed labels and barcodes riding them, a scanner gantry fixed to the floor that
    the parcels pass under, and a diverted parcel sliding diagonally across on top of everything.
``turntable_zoom``
    Camera zooming in on a rotating turntable carrying parcels, with a fixed robot arm over it.
``cart_accelerate``
    Side view of a shelving wall; a cart accelerating left to right passes in front of a second cart
    braking the other way; a hanging sign swings; the hall lights slowly brighten (luma gain).

Rendering: every layer is a colour texture with an alpha mask, drawn with OpenCV at 2 texels per
picture sample and converted to Y'CbCr with the ITU-R BT.601 matrix (studio range). For each
picture the layers are warped with their affine maps onto a canvas at twice the picture
resolution (``cv2.warpAffine``, bicubic, positions quantised to 1/32 canvas sample = 1/64 luma
sample), composited with premultiplied alpha, and reduced by exact box averaging: 2x2 for luma,
4x4 for chroma, which puts chroma samples at the centre of each 2x2 luma block (``420jpeg``
siting). Everything is seeded (``numpy.random.default_rng``) so the same call gives the same bytes.

True motion follows ``synth.flow``'s layout: for every pixel of picture `source`, the displacement
to where the same content is on picture `target`, taken from the topmost layer covering the pixel
(coverage: box-averaged alpha >= 0.5) on `source`.
"""

from __future__ import annotations

from collections.abc import Callable
from dataclasses import dataclass

import cv2
import numpy as np

from synth.errors import ParameterError
from synth.picture import Picture

__all__ = ["SCENES", "render_scene", "true_motion", "scene_description"]

#: Scene names: (a) pan with occlusion, (b) zoom and rotation, (c) acceleration and brightness change.
SCENES = ("parcels_pan", "turntable_zoom", "cart_accelerate")

_DESCRIPTIONS = {
    "parcels_pan": "camera pan over two conveyor belts moving at other speeds; parcels pass under a gantry "
    "and a diverted parcel slides across them",
    "turntable_zoom": "camera zooms in on a rotating turntable carrying parcels under a fixed robot arm",
    "cart_accelerate": "a cart accelerates past a braking cart in front of shelving; a sign swings; "
    "lights slowly brighten",
}

_NOMINAL_W, _NOMINAL_H = 352, 288  # scene geometry is designed at this size and scaled to others
_D = 2  # texture texels per nominal picture sample
_OPTICS_SIGMA = 1.0  # Gaussian blur of the canvas (canvas samples) standing in for the camera's optics
_SEEDS = {"parcels_pan": 20240611, "turntable_zoom": 20240612, "cart_accelerate": 20240613}


def scene_description(name: str) -> str:
    """One sentence saying what happens in scene `name`."""
    _check_name(name)
    return _DESCRIPTIONS[name]


# ------------------------------------------------------------------------------------------------
# Affine helpers (3x3 homogeneous matrices acting on column vectors (x, y, 1))
# ------------------------------------------------------------------------------------------------


def _translate(tx: float, ty: float) -> np.ndarray:
    return np.array([[1.0, 0.0, tx], [0.0, 1.0, ty], [0.0, 0.0, 1.0]])


def _rotate(degrees: float, cx: float = 0.0, cy: float = 0.0) -> np.ndarray:
    a = np.deg2rad(degrees)
    c, s = np.cos(a), np.sin(a)
    r = np.array([[c, -s, 0.0], [s, c, 0.0], [0.0, 0.0, 1.0]])
    return _translate(cx, cy) @ r @ _translate(-cx, -cy)


def _scale(sx: float, sy: float | None = None, cx: float = 0.0, cy: float = 0.0) -> np.ndarray:
    sy = sx if sy is None else sy
    return _translate(cx, cy) @ np.diag([sx, sy, 1.0]) @ _translate(-cx, -cy)


# ------------------------------------------------------------------------------------------------
# Layers and scenes
# ------------------------------------------------------------------------------------------------


@dataclass(frozen=True)
class _Layer:
    """A flat textured layer.

    ``rgba`` holds premultiplied Y'CbCr (float32, code values) and alpha in channel 3; texel
    (col j, row i) sits at layer coordinates ``(u0 + j / _D, v0 + i / _D)``. ``place(t)`` maps layer
    coordinates to world coordinates at picture time t.
    """

    rgba: np.ndarray
    u0: float
    v0: float
    place: Callable[[float], np.ndarray]


@dataclass(frozen=True)
class _Scene:
    layers: tuple[_Layer, ...]
    camera: Callable[[float], np.ndarray]  # world -> nominal picture coordinates at time t
    luma_gain: Callable[[float], float]


def _rgb_to_ycbcr(rgb: np.ndarray) -> np.ndarray:
    """RGB in [0, 1] to Y'CbCr code values, ITU-R BT.601-7 studio range (Y' 16..235, C 16..240)."""
    kr, kb = 0.299, 0.114
    r, g, b = rgb[..., 0], rgb[..., 1], rgb[..., 2]
    y = kr * r + (1.0 - kr - kb) * g + kb * b
    cb = (b - y) / (2.0 * (1.0 - kb))
    cr = (r - y) / (2.0 * (1.0 - kr))
    return np.stack([16.0 + 219.0 * y, 128.0 + 224.0 * cb, 128.0 + 224.0 * cr], axis=-1).astype(np.float32)


def _make_layer(rgb: np.ndarray, alpha: np.ndarray, u0: float, v0: float, place) -> _Layer:
    ycc = _rgb_to_ycbcr(np.clip(rgb, 0.0, 1.0))
    a = np.clip(alpha, 0.0, 1.0).astype(np.float32)
    rgba = np.concatenate([ycc * a[..., None], a[..., None]], axis=-1)
    return _Layer(np.ascontiguousarray(rgba, dtype=np.float32), float(u0), float(v0), place)


def _noise(rng: np.random.Generator, h: int, w: int, sigma: float | tuple[float, float]) -> np.ndarray:
    """Gaussian-filtered white noise of unit standard deviation."""
    n = rng.standard_normal((h, w)).astype(np.float32)
    sx, sy = (sigma, sigma) if np.isscalar(sigma) else sigma
    if sx > 0 or sy > 0:
        n = cv2.GaussianBlur(n, (0, 0), sigmaX=max(sx, 0.01), sigmaY=max(sy, 0.01))
    return n / (float(n.std()) + 1e-6)


def _text(rng: np.random.Generator, n: int, alphabet: str = "ABCDEFGHJKLMNPRSTUVWXYZ0123456789") -> str:
    return "".join(alphabet[int(i)] for i in rng.integers(0, len(alphabet), n))


def _put_text(img: np.ndarray, text: str, org: tuple[int, int], scale: float, colour, thickness: int = 1) -> None:
    cv2.putText(img, text, org, cv2.FONT_HERSHEY_SIMPLEX, scale, colour, thickness, cv2.LINE_AA)


def _barcode(rng: np.random.Generator, img: np.ndarray, x: int, y: int, w: int, h: int) -> None:
    """Random 1-D barcode: black bars of 1..3 texels separated by gaps of 1..3 texels."""
    pos = x + 2
    while pos < x + w - 3:
        bar = int(rng.integers(1, 4))
        img[y : y + h, pos : min(pos + bar, x + w - 2)] = (15, 15, 15)
        pos += bar + int(rng.integers(1, 4))


def _parcel(rng: np.random.Generator, w: float, h: float, *, place, centred: bool = True) -> _Layer:
    """A cardboard parcel of w x h picture samples with tape, a printed label, a barcode and a sticker."""
    W, H = int(round(w * _D)), int(round(h * _D))
    m = 6  # transparent margin in texels, so that edges are interpolated smoothly
    img = np.zeros((H, W, 3), np.uint8)
    base = np.array([172, 126, 80]) + rng.integers(-22, 23, 3)
    img[:] = np.clip(base, 0, 255)
    # flap seam and tape
    tape_w = max(6, H // 6)
    ty = H // 2 - tape_w // 2 + int(rng.integers(-H // 10, H // 10 + 1))
    tape = (205, 190, 150) if rng.random() < 0.5 else (90, 120, 190)
    img[ty : ty + tape_w] = tape
    cv2.line(img, (0, ty + tape_w // 2), (W - 1, ty + tape_w // 2), (120, 95, 60), 1, cv2.LINE_AA)
    # label
    lw, lh = int(W * 0.5), int(H * 0.36)
    lx = int(rng.integers(4, max(5, W - lw - 4)))
    ly = 4 if ty > H // 2 else H - lh - 4
    img[ly : ly + lh, lx : lx + lw] = (244, 242, 236)
    cv2.rectangle(img, (lx, ly), (lx + lw - 1, ly + lh - 1), (40, 40, 40), 1)
    scale = 0.28 + 0.02 * _D
    line_h = max(8, int(11 * scale / 0.32))
    rows = max(1, (lh - 12) // line_h)
    for k in range(min(3, rows)):
        _put_text(
            img, _text(rng, int(rng.integers(5, 9))), (lx + 3, ly + 3 + (k + 1) * line_h - 2), scale, (25, 25, 30)
        )
    bar_h = max(4, lh - 6 - min(3, rows) * line_h)
    _barcode(rng, img, lx, ly + lh - bar_h - 2, lw, bar_h)
    # coloured handling sticker in a corner away from the label
    sx = W - 18 if lx < W // 2 - lw // 4 else 4
    sy = H - 16 if ly < H // 2 else 4
    colour = [(200, 30, 30), (30, 150, 60), (240, 200, 20), (40, 70, 200)][int(rng.integers(0, 4))]
    cv2.rectangle(img, (sx, sy), (sx + 13, sy + 11), colour, -1)
    cv2.arrowedLine(img, (sx + 6, sy + 10), (sx + 6, sy + 2), (250, 250, 250), 1, cv2.LINE_AA, tipLength=0.4)
    rgb = img.astype(np.float32) / 255.0
    # cardboard fibre and dirt
    rgb += (0.035 * _noise(rng, H, W, (3.0, 0.6)) + 0.02 * _noise(rng, H, W, 0.7))[..., None]
    # shaded edges
    yy, xx = np.mgrid[0:H, 0:W]
    edge = np.minimum(np.minimum(xx, W - 1 - xx), np.minimum(yy, H - 1 - yy)).astype(np.float32)
    rgb *= (0.78 + 0.22 * np.clip(edge / 5.0, 0, 1))[..., None]
    rgb = np.pad(rgb, ((m, m), (m, m), (0, 0)))
    alpha = np.pad(np.ones((H, W), np.float32), m)
    u0 = -w / 2 - m / _D if centred else -m / _D
    v0 = -h / 2 - m / _D if centred else -m / _D
    return _make_layer(rgb, alpha, u0, v0, place)


def _floor(
    rng: np.random.Generator,
    x0: float,
    y0: float,
    w: float,
    h: float,
    *,
    place,
    tile: float = 40.0,
    tint=(0.52, 0.52, 0.5),
    stencil: str = "BAY",
) -> _Layer:
    """Concrete floor with tile joints, stains, painted lane lines, hazard stripes and stencilled text."""
    W, H = int(round(w * _D)), int(round(h * _D))
    gray = 0.10 * _noise(rng, H, W, 12.0) + 0.06 * _noise(rng, H, W, 3.0) + 0.045 * _noise(rng, H, W, 0.8)
    rgb = np.empty((H, W, 3), np.float32)
    for c in range(3):
        rgb[..., c] = tint[c] + gray
    img = np.clip(rgb * 255.0, 0, 255).astype(np.uint8)
    step = int(tile * _D)
    ox, oy = int(rng.integers(0, step)), int(rng.integers(0, step))
    for x in range(ox, W, step):
        cv2.line(img, (x, 0), (x, H - 1), (70, 70, 68), 1, cv2.LINE_AA)
    for y in range(oy, H, step):
        cv2.line(img, (0, y), (W - 1, y), (70, 70, 68), 1, cv2.LINE_AA)
    for _ in range(int(W * H / 9000)):  # stains
        c = (int(rng.integers(0, W)), int(rng.integers(0, H)))
        ax = (int(rng.integers(4, 22)), int(rng.integers(3, 14)))
        shade = int(rng.integers(60, 110))
        cv2.ellipse(img, c, ax, float(rng.uniform(0, 180)), 0, 360, (shade, shade, shade - 4), -1, cv2.LINE_AA)
    for _ in range(int(W * H / 40000)):  # stencilled bay numbers
        org = (int(rng.integers(0, W - 80)), int(rng.integers(30, H)))
        _put_text(img, f"{stencil} {int(rng.integers(1, 99)):02d}", org, 0.9, (225, 220, 210), 2)
    for _ in range(3):  # painted lane lines with hazard stripes
        y = int(rng.integers(0, H - 12))
        img[y : y + 10] = (230, 200, 40)
        for x in range(int(rng.integers(0, 20)), W, 20):
            pts = np.array([[x, y], [x + 8, y], [x + 2, y + 9], [x - 6, y + 9]], np.int32)
            cv2.fillConvexPoly(img, pts, (30, 30, 30), cv2.LINE_AA)
    rgb = img.astype(np.float32) / 255.0
    return _make_layer(rgb, np.ones((H, W), np.float32), x0, y0, place)


def _belt(rng: np.random.Generator, x0: float, w: float, h: float, *, place) -> _Layer:
    """Rubber belt: ribs across it every ~6 samples, scuffs, splice marks and chalk marks."""
    W, H = int(round(w * _D)), int(round(h * _D))
    g = 0.20 + 0.035 * _noise(rng, H, W, 0.7) + 0.03 * _noise(rng, H, W, (6.0, 1.0))
    img = np.clip(np.repeat(g[..., None], 3, axis=2) * 255.0, 0, 255).astype(np.uint8)
    x = 0
    while x < W:
        cv2.line(img, (x, 0), (x, H - 1), (28, 28, 30), 2)
        cv2.line(img, (x + 2, 0), (x + 2, H - 1), (85, 85, 88), 1)
        x += 12 + int(rng.integers(-1, 2))
    for _ in range(int(W * H / 3000)):  # scuffs
        p = (int(rng.integers(0, W)), int(rng.integers(0, H)))
        q = (p[0] + int(rng.integers(-14, 15)), p[1] + int(rng.integers(-6, 7)))
        s = int(rng.integers(90, 150))
        cv2.line(img, p, q, (s, s, s), 1, cv2.LINE_AA)
    for x in range(int(rng.integers(40, 120)), W, int(rng.integers(260, 340))):  # splices
        cv2.line(img, (x, 0), (x + H // 3, H - 1), (150, 150, 145), 3, cv2.LINE_AA)
        _put_text(img, _text(rng, 3), (x + 12, H // 2), 0.6, (200, 200, 80), 1)
    rgb = img.astype(np.float32) / 255.0
    return _make_layer(rgb, np.ones((H, W), np.float32), x0, -h / 2, place)


def _rail(rng: np.random.Generator, x0: float, y0: float, w: float, h: float, *, place) -> _Layer:
    """Painted steel side rail with bolts and worn spots."""
    W, H = int(round(w * _D)), int(round(h * _D))
    prof = 0.45 + 0.25 * np.sin(np.linspace(0, np.pi, H, dtype=np.float32))[:, None]
    rgb = np.empty((H, W, 3), np.float32)
    wear = 0.05 * _noise(rng, H, W, (8.0, 1.0)) + 0.03 * _noise(rng, H, W, 0.7)
    for c, k in enumerate((0.55, 0.62, 0.78)):
        rgb[..., c] = prof * k + wear
    img = np.clip(rgb * 255.0, 0, 255).astype(np.uint8)
    x = int(rng.integers(5, 30))
    while x < W:
        cv2.circle(img, (x, H // 2), max(2, H // 5), (50, 50, 55), -1, cv2.LINE_AA)
        cv2.circle(img, (x - 1, H // 2 - 1), 1, (220, 220, 225), -1, cv2.LINE_AA)
        x += 38 + int(rng.integers(-8, 9))
    return _make_layer(img.astype(np.float32) / 255.0, np.ones((H, W), np.float32), x0, y0, place)


def _panel(
    rng: np.random.Generator,
    w: float,
    h: float,
    *,
    colour,
    text_colour,
    lines: list[str],
    place,
    u0: float = 0.0,
    v0: float = 0.0,
    rivets: bool = True,
    scale: float = 0.55,
) -> _Layer:
    """Painted panel (gantry beam, sign, cart side) with text lines and rivets."""
    W, H = int(round(w * _D)), int(round(h * _D))
    m = 6
    rgb = np.empty((H, W, 3), np.float32)
    sh = 0.05 * _noise(rng, H, W, (10.0, 2.0)) + 0.025 * _noise(rng, H, W, 0.8)
    for c in range(3):
        rgb[..., c] = colour[c] / 255.0 + sh
    img = np.clip(rgb * 255.0, 0, 255).astype(np.uint8)
    cv2.rectangle(img, (1, 1), (W - 2, H - 2), tuple(int(v * 0.6) for v in colour), 2, cv2.LINE_AA)
    step = max(12, int(H / (len(lines) + 1)) if H > W else int(W / (len(lines) + 1)))
    for k, s in enumerate(lines):
        if H > W:  # vertical panel: stack text down the panel
            _put_text(img, s, (6, 14 + (k + 1) * step - step // 2), scale, text_colour, 1)
        else:
            _put_text(img, s, (6 + k * step, H // 2 + 5), scale, text_colour, 1)
    if rivets:
        for x in range(6, W - 3, 26):
            for y in (5, H - 6):
                cv2.circle(img, (x, y), 2, (215, 215, 220), -1, cv2.LINE_AA)
    rgb = np.pad(img.astype(np.float32) / 255.0, ((m, m), (m, m), (0, 0)))
    alpha = np.pad(np.ones((H, W), np.float32), m)
    return _make_layer(rgb, alpha, u0 - m / _D, v0 - m / _D, place)


def _static(m: np.ndarray | None = None):
    mat = np.eye(3) if m is None else m
    return lambda t: mat


def _moving(vx: float, vy: float, x0: float, y0: float, rot0: float = 0.0, spin: float = 0.0):
    """Layer placed at (x0, y0) moving with constant velocity (vx, vy) per picture, rotating `spin` deg/picture."""
    return lambda t: _translate(x0 + vx * t, y0 + vy * t) @ _rotate(rot0 + spin * t)


# ------------------------------------------------------------------------------------------------
# The scenes (world coordinates in nominal 352x288 picture samples)
# ------------------------------------------------------------------------------------------------


def _scene_parcels_pan(rng: np.random.Generator) -> _Scene:
    layers: list[_Layer] = [_floor(rng, -80, -60, 540, 420, place=_static(), stencil="BAY")]
    belt_a_y, belt_b_y, belt_h = 92.0, 206.0, 70.0
    v_a, v_b = 3.0, -3.5  # belt speeds in world samples per picture
    layers.append(_belt(rng, -260, 900, belt_h, place=lambda t: _translate(v_a * t, belt_a_y)))
    layers.append(_belt(rng, -260, 900, belt_h, place=lambda t: _translate(v_b * t, belt_b_y)))
    for yc in (belt_a_y, belt_b_y):
        for edge in (-1, 1):
            layers.append(_rail(rng, -80, -4, 540, 8, place=_static(_translate(0, yc + edge * (belt_h / 2 + 1)))))
    # parcels riding the belts (world position at t = 0, size, fixed small rotation)
    for x, w, h, rot in ((-30, 58, 46, 0.0), (95, 44, 40, 4.0), (215, 66, 52, -2.5), (340, 50, 44, 1.5)):
        layers.append(_parcel(rng, w, h, place=_moving(v_a, 0, x, belt_a_y, rot)))
    for x, w, h, rot in ((60, 62, 50, -3.0), (190, 48, 42, 2.0), (300, 56, 48, 0.0), (420, 46, 44, -1.5)):
        layers.append(_parcel(rng, w, h, place=_moving(v_b, 0, x, belt_b_y, rot)))
    # scanner gantry fixed to the floor: parcels pass under it
    layers.append(
        _panel(
            rng,
            26,
            400,
            colour=(40, 70, 150),
            text_colour=(250, 220, 40),
            lines=["SCAN", "G-12", "MAX", "80KG", "HALT", "A-03"],
            place=_static(_translate(262, -50)),
            scale=0.5,
        )
    )
    # diverted parcel sliding diagonally across everything, slowly turning
    layers.append(_parcel(rng, 54, 44, place=_moving(-1.0, 4.0, 150, 20, 10.0, -1.2)))
    return _Scene(tuple(layers), camera=lambda t: _translate(-1.5 * t, -0.4 * t), luma_gain=lambda t: 1.0)


def _turntable(rng: np.random.Generator, r: float, *, place) -> _Layer:
    """Steel turntable disc with radial ribs, concentric rings, printed sector numbers and wear."""
    R = int(round(r * _D))
    m = 6
    n = 2 * R + 2 * m
    yy, xx = np.mgrid[0:n, 0:n].astype(np.float32) - (n - 1) / 2.0
    rad = np.hypot(xx, yy)
    ang = np.arctan2(yy, xx)
    g = 0.55 + 0.05 * np.cos(ang * 36) * (rad > R * 0.3) + 0.04 * _noise(rng, n, n, 0.8) + 0.05 * _noise(rng, n, n, 6.0)
    rgb = np.stack([g * 0.95, g * 0.97, g * 1.02], axis=-1)
    img = np.clip(rgb * 255.0, 0, 255).astype(np.uint8)
    c = (n // 2, n // 2)
    for k in (0.25, 0.55, 0.96):
        cv2.circle(img, c, int(R * k), (60, 62, 70), 2, cv2.LINE_AA)
    for s in range(12):
        a = 2 * np.pi * s / 12
        p = (int(c[0] + 0.62 * R * np.cos(a)), int(c[1] + 0.62 * R * np.sin(a)))
        q = (int(c[0] + 0.94 * R * np.cos(a)), int(c[1] + 0.94 * R * np.sin(a)))
        cv2.line(img, p, q, (200, 60, 40), 2, cv2.LINE_AA)
        t = (int(c[0] + 0.86 * R * np.cos(a + 0.13)) - 8, int(c[1] + 0.86 * R * np.sin(a + 0.13)) + 5)
        _put_text(img, f"{s + 1:02d}", t, 0.55, (20, 20, 25), 1)
    rgb = img.astype(np.float32) / 255.0
    alpha = np.clip(R + 0.5 - rad, 0.0, 1.0).astype(np.float32)
    return _make_layer(rgb, alpha, -(n / 2) / _D, -(n / 2) / _D, place)


def _scene_turntable_zoom(rng: np.random.Generator) -> _Scene:
    cx, cy = 176.0, 150.0
    spin = 1.6  # degrees per picture
    layers: list[_Layer] = [
        _floor(rng, -60, -60, 472, 408, place=_static(), tile=36, tint=(0.5, 0.53, 0.55), stencil="ZONE")
    ]
    layers.append(_turntable(rng, 118, place=lambda t: _translate(cx, cy) @ _rotate(spin * t)))
    for r, a, w, h in ((70, 20, 52, 44), (72, 145, 46, 40), (64, 255, 58, 46), (0, 0, 34, 30)):
        off = (r * np.cos(np.deg2rad(a)), r * np.sin(np.deg2rad(a)))
        place = (lambda off, a: lambda t: _translate(cx, cy) @ _rotate(spin * t) @ _translate(*off) @ _rotate(a + 90))(
            off, a
        )
        layers.append(_parcel(rng, w, h, place=place))
    layers.append(
        _panel(
            rng,
            150,
            22,
            colour=(230, 140, 30),
            text_colour=(20, 20, 20),
            lines=["ARM", "R7", "KEEP", "CLEAR"],
            place=_static(_translate(250, 40) @ _rotate(28)),
            u0=0.0,
            v0=-11.0,
            scale=0.5,
        )
    )

    def camera(t: float) -> np.ndarray:
        s = 1.3 ** (t / 16.0)
        return _translate(176 + 0.3 * t, 144) @ _scale(s) @ _translate(-cx, -cy + 0.2 * t)

    return _Scene(tuple(layers), camera=camera, luma_gain=lambda t: 1.0)


def _shelving(rng: np.random.Generator, w: float, h: float) -> _Layer:
    """Side view of a wall of shelves loaded with parcels, above a floor strip."""
    W, H = int(round(w * _D)), int(round(h * _D))
    g = 0.62 + 0.04 * _noise(rng, H, W, 10.0) + 0.025 * _noise(rng, H, W, 0.8)
    img = np.clip(np.stack([g * 0.92, g * 0.95, g], axis=-1) * 255.0, 0, 255).astype(np.uint8)
    floor_y = int(H * 0.78)
    shelf_ys = [int(H * f) for f in (0.12, 0.34, 0.56)]
    for x in range(0, W, 150):  # uprights
        cv2.rectangle(img, (x, 0), (x + 10, floor_y), (30, 60, 150), -1)
        for y in range(8, floor_y, 16):
            cv2.circle(img, (x + 5, y), 2, (200, 200, 210), -1, cv2.LINE_AA)
    for y in shelf_ys:
        x = 12
        while x < W - 30:  # boxes on the shelf
            bw, bh = int(rng.integers(26, 70)), int(rng.integers(24, int(H * 0.2)))
            shade = np.array([170, 125, 80]) + rng.integers(-30, 31, 3)
            cv2.rectangle(img, (x, y + int(H * 0.2) - bh), (x + bw, y + int(H * 0.2)), tuple(int(v) for v in shade), -1)
            cv2.rectangle(img, (x, y + int(H * 0.2) - bh), (x + bw, y + int(H * 0.2)), (90, 70, 45), 1)
            if bw > 34:
                lx, ly = x + 4, y + int(H * 0.2) - bh + 4
                cv2.rectangle(img, (lx, ly), (lx + bw - 10, ly + 12), (240, 240, 235), -1)
                _put_text(img, _text(rng, 4), (lx + 2, ly + 10), 0.32, (20, 20, 20))
            x += bw + int(rng.integers(2, 10))
        cv2.rectangle(img, (0, y + int(H * 0.2)), (W - 1, y + int(H * 0.2) + 7), (240, 120, 30), -1)
    floor = 0.35 + 0.05 * _noise(rng, H - floor_y, W, (8.0, 1.0)) + 0.03 * _noise(rng, H - floor_y, W, 0.7)
    img[floor_y:] = np.clip(np.repeat(floor[..., None], 3, axis=2) * 255.0, 0, 255).astype(np.uint8)
    for x in range(0, W, 60):
        cv2.line(img, (x, floor_y), (x - 40, H - 1), (60, 60, 60), 1, cv2.LINE_AA)
    rgb = img.astype(np.float32) / 255.0
    return _make_layer(rgb, np.ones((H, W), np.float32), -40, -40, _static())


def _cart(rng: np.random.Generator, w: float, *, colour, place) -> _Layer:
    """Side view of a platform cart with a handle, wheels and a stack of labelled parcels (bottom centre at 0)."""
    height = 150.0
    W, H = int(round(w * _D)), int(round(height * _D))
    m = 6
    img = np.zeros((H, W, 3), np.uint8)
    alpha = np.zeros((H, W), np.float32)
    deck_y = H - 34
    # boxes stacked on the deck
    x = 8
    while x < W - 40:
        bw = int(rng.integers(50, 90))
        bw = min(bw, W - 30 - x)
        top = deck_y - int(rng.integers(70, H - 60))
        y = deck_y
        while y > top + 20:
            bh = int(rng.integers(34, 64))
            y0 = max(top, y - bh)
            shade = tuple(int(v) for v in np.array([175, 128, 82]) + rng.integers(-25, 26, 3))
            cv2.rectangle(img, (x, y0), (x + bw, y), shade, -1)
            cv2.rectangle(img, (x, y0), (x + bw, y), (95, 70, 45), 1)
            cv2.rectangle(alpha, (x, y0), (x + bw, y), 1.0, -1)
            lx, ly = x + 5, y0 + 5
            if y - y0 > 26 and bw > 40:
                cv2.rectangle(img, (lx, ly), (lx + bw - 12, ly + 16), (242, 242, 238), -1)
                _put_text(img, _text(rng, 5), (lx + 2, ly + 12), 0.36, (20, 20, 25))
                _barcode(rng, img, lx, y - 10, bw - 12, 6)
            y = y0 - 1
        x += bw + 3
    # deck, handle and wheels
    cv2.rectangle(img, (0, deck_y), (W - 1, deck_y + 10), colour, -1)
    cv2.rectangle(alpha, (0, deck_y), (W - 1, deck_y + 10), 1.0, -1)
    cv2.rectangle(img, (W - 14, 20), (W - 6, deck_y), colour, -1)
    cv2.rectangle(alpha, (W - 14, 20), (W - 6, deck_y), 1.0, -1)
    cv2.rectangle(img, (W - 30, 14), (W - 1, 24), (30, 30, 30), -1)
    cv2.rectangle(alpha, (W - 30, 14), (W - 1, 24), 1.0, -1)
    _put_text(img, _text(rng, 2) + "-" + _text(rng, 3, "0123456789"), (10, deck_y + 9), 0.35, (250, 250, 250))
    for wx in (22, W - 30):
        cv2.circle(img, (wx, H - 12), 11, (25, 25, 25), -1, cv2.LINE_AA)
        cv2.circle(img, (wx, H - 12), 4, (170, 170, 175), -1, cv2.LINE_AA)
        cv2.circle(alpha, (wx, H - 12), 11, 1.0, -1, cv2.LINE_AA)
        cv2.rectangle(img, (wx - 2, deck_y + 10), (wx + 2, H - 20), (60, 60, 60), -1)
        cv2.rectangle(alpha, (wx - 2, deck_y + 10), (wx + 2, H - 20), 1.0, -1)
    rgb = img.astype(np.float32) / 255.0
    rgb += (0.02 * _noise(rng, H, W, 0.7))[..., None]
    rgb = np.pad(rgb, ((m, m), (m, m), (0, 0)))
    alpha = np.pad(alpha, m)
    return _make_layer(rgb, alpha, -w / 2 - m / _D, -height - m / _D, place)


def _scene_cart_accelerate(rng: np.random.Generator) -> _Scene:
    layers: list[_Layer] = [_shelving(rng, 440, 370)]
    # braking cart, further back, right to left: x = 300 - (6.0 t - 0.17 t^2)
    layers.append(
        _cart(rng, 120, colour=(40, 120, 60), place=lambda t: _translate(300.0 - (6.0 * t - 0.17 * t * t), 238.0))
    )
    # accelerating cart in front, left to right: x = 90 + 0.3 t + 0.25 t^2
    layers.append(
        _cart(rng, 140, colour=(180, 40, 40), place=lambda t: _translate(90.0 + 0.3 * t + 0.25 * t * t, 270.0))
    )
    # hanging sign swinging about its pivot above the picture: angle = 9 deg * sin(2 pi t / 22)
    sign = _panel(
        rng,
        90,
        34,
        colour=(250, 210, 30),
        text_colour=(20, 20, 20),
        lines=["LANE", "4B"],
        place=lambda t: (
            _translate(250.0, -30.0) @ _rotate(9.0 * np.sin(2 * np.pi * t / 22.0)) @ _translate(-45.0, 62.0)
        ),
        scale=0.7,
    )
    layers.append(sign)
    chain = _panel(
        rng,
        3,
        64,
        colour=(80, 80, 85),
        text_colour=(0, 0, 0),
        lines=[],
        rivets=False,
        place=lambda t: _translate(250.0, -30.0) @ _rotate(9.0 * np.sin(2 * np.pi * t / 22.0)) @ _translate(-1.5, 0.0),
    )
    layers.insert(-1, chain)
    return _Scene(tuple(layers), camera=lambda t: np.eye(3), luma_gain=lambda t: 1.0 + 0.06 * t / 16.0)


_BUILDERS = {
    "parcels_pan": _scene_parcels_pan,
    "turntable_zoom": _scene_turntable_zoom,
    "cart_accelerate": _scene_cart_accelerate,
}
_CACHE: dict[str, _Scene] = {}


def _check_name(name: str) -> None:
    if name not in SCENES:
        raise ParameterError(f"scene must be one of {', '.join(SCENES)}, got {name!r}")


def _check_size(width: int, height: int) -> None:
    if int(width) != width or int(height) != height or width < 16 or height < 16 or width % 2 or height % 2:
        raise ParameterError(f"width and height must be even integers >= 16, got {width}x{height}")


def _scene(name: str) -> _Scene:
    _check_name(name)
    if name not in _CACHE:
        _CACHE[name] = _BUILDERS[name](np.random.default_rng(_SEEDS[name]))
    return _CACHE[name]


def _picture_from_layer(scene: _Scene, layer: _Layer, t: float, width: int, height: int) -> np.ndarray:
    """3x3 map from layer coordinates to picture coordinates (luma samples) at time t."""
    size = _scale(width / _NOMINAL_W, height / _NOMINAL_H)
    return size @ scene.camera(t) @ layer.place(t)


def _canvas_from_texel(pic_from_layer: np.ndarray, layer: _Layer) -> np.ndarray:
    # texel (j, i) -> layer (u0 + j/D, v0 + i/D); picture x -> canvas 2x + 0.5 (2x2 box average
    # of canvas samples 2x, 2x+1 is centred on picture sample x).
    layer_from_texel = _translate(layer.u0, layer.v0) @ _scale(1.0 / _D)
    canvas_from_pic = _translate(0.5, 0.5) @ _scale(2.0)
    return (canvas_from_pic @ pic_from_layer @ layer_from_texel)[:2]


def _warp(layer: _Layer, m: np.ndarray, cw: int, ch: int, channels=slice(None)) -> np.ndarray:
    src = np.ascontiguousarray(layer.rgba[..., channels])
    out = cv2.warpAffine(src, m, (cw, ch), flags=cv2.INTER_CUBIC, borderMode=cv2.BORDER_CONSTANT, borderValue=0)
    return out


def _box(a: np.ndarray, k: int) -> np.ndarray:
    h, w = a.shape[0] // k, a.shape[1] // k
    return a.reshape(h, k, w, k, *a.shape[2:]).mean(axis=(1, 3), dtype=np.float64)


def _render(scene: _Scene, t: float, width: int, height: int) -> Picture:
    cw, ch = 2 * width, 2 * height
    canvas = np.zeros((ch, cw, 3), np.float32)
    for layer in scene.layers:
        m = _canvas_from_texel(_picture_from_layer(scene, layer, t, width, height), layer)
        warped = _warp(layer, m, cw, ch)
        a = np.clip(warped[..., 3], 0.0, 1.0)
        canvas *= (1.0 - a)[..., None]
        canvas += warped[..., :3]
    if _OPTICS_SIGMA > 0:
        canvas = cv2.GaussianBlur(
            canvas, (0, 0), sigmaX=_OPTICS_SIGMA, sigmaY=_OPTICS_SIGMA, borderType=cv2.BORDER_REFLECT
        )
    y = _box(canvas[..., 0], 2)
    gain = float(scene.luma_gain(t))
    if gain != 1.0:
        y = 16.0 + (y - 16.0) * gain
    cb = _box(canvas[..., 1], 4)
    cr = _box(canvas[..., 2], 4)
    return Picture.from_float((y, cb, cr), chroma_format="420", bit_depth=8)


def render_scene(name: str, *, frames: int = 17, width: int = 352, height: int = 288) -> list[Picture]:
    """Render demo scene `name` as 4:2:0 8-bit pictures.

    Parameters
    ----------
    name : {'parcels_pan', 'turntable_zoom', 'cart_accelerate'}
        One of `SCENES`.
    frames : int, keyword-only
        Number of pictures (display times 0, 1, ..., frames - 1).
    width, height : int, keyword-only
        Picture size in luma samples (even). The scene is designed at 352x288 and scaled.

    Returns
    -------
    list of Picture
        4:2:0 8-bit pictures, chroma sited at the centre of each 2x2 luma block (``420jpeg``),
        Y'CbCr per ITU-R BT.601-7 studio range.

    Raises
    ------
    ParameterError
        Unknown scene, frames < 1, odd or tiny sizes.

    Notes
    -----
    Deterministic: the same arguments give the same samples, bit for bit, on the same OpenCV/numpy
    build. See the module docstring for how pictures are rendered.
    """
    _check_name(name)
    _check_size(width, height)
    if int(frames) != frames or frames < 1:
        raise ParameterError(f"frames must be a positive integer, got {frames!r}")
    scene = _scene(name)
    return [_render(scene, float(t), int(width), int(height)) for t in range(int(frames))]


def true_motion(name: str, source: int, target: int, *, width: int = 352, height: int = 288) -> np.ndarray:
    """True motion from picture `source` to picture `target` of demo scene `name`.

    Parameters
    ----------
    name : str
        One of `SCENES`.
    source, target : int
        Picture indices (display times); any non-negative values, also beyond the rendered clip.
    width, height : int, keyword-only
        Picture size, as given to `render_scene`.

    Returns
    -------
    ndarray of float32, shape (height, width, 2)
        ``flow[y, x] = (fx, fy)``: the content at luma sample (x, y) of picture `source` is at
        (x + fx, y + fy) on picture `target` (layout of `synth.flow`). Each pixel follows the
        topmost layer covering it on `source` (box-averaged alpha >= 0.5); the displacement is
        analytic, from the layers' affine maps.

    Raises
    ------
    ParameterError
        Unknown scene, negative picture index, odd or tiny sizes.
    """
    _check_name(name)
    _check_size(width, height)
    for label, v in (("source", source), ("target", target)):
        if int(v) != v or v < 0:
            raise ParameterError(f"{label} must be a non-negative picture index, got {v!r}")
    scene = _scene(name)
    if source == target:
        return np.zeros((height, width, 2), np.float32)
    ts, tt = float(source), float(target)
    cw, ch = 2 * width, 2 * height
    ys, xs = np.mgrid[0:height, 0:width].astype(np.float64)
    flow = np.zeros((height, width, 2), np.float64)
    for layer in scene.layers:
        ps = _picture_from_layer(scene, layer, ts, width, height)
        m = _canvas_from_texel(ps, layer)
        alpha = _box(np.clip(_warp(layer, m, cw, ch, channels=3), 0.0, 1.0), 2)
        cover = alpha >= 0.5
        if not cover.any():
            continue
        a = _picture_from_layer(scene, layer, tt, width, height) @ np.linalg.inv(ps)
        fx = a[0, 0] * xs + a[0, 1] * ys + a[0, 2] - xs
        fy = a[1, 0] * xs + a[1, 1] * ys + a[1, 2] - ys
        flow[..., 0] = np.where(cover, fx, flow[..., 0])
        flow[..., 1] = np.where(cover, fy, flow[..., 1])
    return flow.astype(np.float32)
