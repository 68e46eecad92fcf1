"""Phone-like clips of a ball with their truth: a second renderer, written apart from the tracker.

- The ball flies by its own RK4 integrator (gravity, quadratic drag, lift along spin axis x velocity),
  bounces with restitution and a friction factor, and is kicked again when it falls through a kick height.
- A pinhole camera with two-term radial distortion; the background (sky with clouds; grass, court or a
  wooden floor with painted lines; a dark hall, brick, trees, a fence) is ray-cast once per scene onto a
  canvas larger than the frame.
- Each exposure: figures (limbs as thick anti-aliased strokes, shirts; walking, kicking, throwing) and the
  ball (a shaded, supersampled sphere with panels or a seam, moved over the shutter time, sheared by the
  rolling shutter) are drawn on the canvas in depth order; hand-held view motion (shake, a following
  pan, roll), the rolling shutter and the lens distortion are one remap from canvas to frame; then
  lagging auto-exposure, mains flicker, vignetting, shot + read noise, a square-root tone curve, netting
  in front of the lens; frame-rate conversion (repeated or dropped exposures), a scene cut with a
  one-frame gap in the times; H.264 (libx264, yuv420p) at a phone bitrate through PyAV.

Truth per container frame: time, exposure, repeated-frame flag, the ball's image centre (the mean of its
projections over the exposure, through view motion and distortion), radius (f R / depth times the lens's
local magnification) and whether it is wholly in view and not hidden by a figure.
"""
from __future__ import annotations

import math
from dataclasses import dataclass, field
from fractions import Fraction

import cv2
import numpy as np
from scipy.signal import lfilter

G = 9.81  # [m/s^2] (common practice)
AIR = 1.2  # air density [kg/m^3] (common practice)


@dataclass
class Lens:
    """Pinhole camera with radial distortion; world x right, y forward, z up; angles in degrees."""
    size: tuple[int, int]
    f: float  # focal length [px]
    pos: tuple[float, float, float] = (0.0, 0.0, 1.5)
    yaw: float = 0.0  # turn of the view to the right of +y
    pitch: float = 0.0  # up positive
    roll: float = 0.0
    k1: float = 0.0
    k2: float = 0.0

    @property
    def centre(self):
        return (self.size[0] - 1) / 2.0, (self.size[1] - 1) / 2.0

    def rotation(self) -> np.ndarray:
        """World-to-camera rotation; camera axes: x right, y down, z forward."""
        y, p, r = np.radians([self.yaw, self.pitch, self.roll])
        fwd = np.array([math.sin(y) * math.cos(p), math.cos(y) * math.cos(p), math.sin(p)])
        right = np.array([math.cos(y), -math.sin(y), 0.0])
        down = np.cross(fwd, right)
        right, down = math.cos(r) * right + math.sin(r) * down, -math.sin(r) * right + math.cos(r) * down
        return np.stack([right, down, fwd])

    def to_camera(self, pts) -> np.ndarray:
        return (np.atleast_2d(pts) - np.asarray(self.pos)) @ self.rotation().T

    def _factor(self, x, y):
        r2 = x * x + y * y
        return 1 + self.k1 * r2 + self.k2 * r2 * r2, r2

    def distort(self, x, y):
        d, _ = self._factor(x, y)
        return x * d, y * d

    def undistort(self, xd, yd, iters: int = 12):
        x, y = xd, yd
        for _ in range(iters):  # fixed-point iteration x = xd / d(x)
            d, _ = self._factor(x, y)
            x, y = xd / d, yd / d
        return x, y

    def magnification(self, x, y):
        """Local areal scale of the distortion, as a length ratio: sqrt(d (d + r dd/dr))."""
        d, r2 = self._factor(x, y)
        return np.sqrt(d * (d + 2 * self.k1 * r2 + 4 * self.k2 * r2 * r2))

    def pinhole(self, pts, distorted: bool = False):
        """Pixel (u, v) [px] (undistorted unless ``distorted``) and depth [m] of world points, shape (N, 3) [m]."""
        c = self.to_camera(pts)
        x, y = c[:, 0] / c[:, 2], c[:, 1] / c[:, 2]
        if distorted:
            x, y = self.distort(x, y)
        return np.stack([self.centre[0] + self.f * x, self.centre[1] + self.f * y], 1), c[:, 2]

    def project(self, pts):
        """Distorted pixel (u, v) [px] and depth [m] of world points, shape (N, 3) [m]."""
        return self.pinhole(pts, True)


@dataclass
class Ball:
    radius_m: float
    mass_kg: float
    cd: float = 0.3
    cl: float = 0.0  # lift coefficient; lift along spin_axis x velocity
    spin_axis: tuple = (0.0, 1.0, 0.0)
    spin_rps: float = 5.0
    albedo: tuple = (0.8, 0.8, 0.78)
    marking: tuple = (0.04, 0.04, 0.05)
    pattern: str = "panels"  # panels | seam | plain
    restitution: float = 0.7
    friction: float = 0.8


FOOTBALL = Ball(0.11, 0.43, 0.25, 0.0, (0, 1, 0), 3.0, (0.78, 0.78, 0.75), (0.05, 0.05, 0.08), "panels", 0.7, 0.8)
TENNIS = Ball(0.0335, 0.057, 0.55, 0.1, (0, -1, 0), 25.0, (0.55, 0.75, 0.08), (0.85, 0.85, 0.8), "seam", 0.75, 0.65)
BASEBALL = Ball(0.0366, 0.145, 0.35, 0.3, (0, -1, 0), 35.0, (0.8, 0.78, 0.72), (0.6, 0.06, 0.05), "seam", 0.5, 0.7)
SOFTBALL = Ball(0.048, 0.19, 0.4, 0.05, (0, -1, 0), 15.0, (0.8, 0.85, 0.2), (0.7, 0.1, 0.1), "seam", 0.5, 0.7)


def fly(ball: Ball, p0, v0, t0: float, t1: float, kicks=(), dt: float = 2.5e-4):
    """RK4 flight from time t0 [s] to t1 [s]: times (N,), positions (N, 3) [m], segment index (N,).

    ``kicks``: (height [m], new velocity [m/s]) taken in turn when the falling ball passes the height.
    A new segment starts at every bounce and kick.
    """
    k = 0.5 * AIR * math.pi * ball.radius_m ** 2 / ball.mass_kg
    ax, ay, az = np.asarray(ball.spin_axis, float) / np.linalg.norm(ball.spin_axis)
    kd, kl = k * ball.cd, k * ball.cl

    def acc(v):
        s = math.sqrt(v[0] * v[0] + v[1] * v[1] + v[2] * v[2])
        return (-kd * s * v[0] + kl * s * (ay * v[2] - az * v[1]), -kd * s * v[1] + kl * s * (az * v[0] - ax * v[2]),
                -G - kd * s * v[2] + kl * s * (ax * v[1] - ay * v[0]))

    def add(a, b, h):
        return (a[0] + h * b[0], a[1] + h * b[1], a[2] + h * b[2])

    n = int(math.ceil((t1 - t0) / dt)) + 1
    p, v = tuple(map(float, p0)), tuple(map(float, v0))
    out, seg, s_i, kicks = np.empty((n, 3)), np.zeros(n, int), 0, list(kicks)
    for i in range(n):
        out[i], seg[i] = p, s_i
        a1 = acc(v)
        a2 = acc(add(v, a1, 0.5 * dt))
        a3 = acc(add(v, a2, 0.5 * dt))
        a4 = acc(add(v, a3, dt))
        p = tuple(p[j] + dt * (v[j] + dt / 6 * (a1[j] + a2[j] + a3[j])) for j in range(3))
        v = tuple(v[j] + dt / 6 * (a1[j] + 2 * a2[j] + 2 * a3[j] + a4[j]) for j in range(3))
        if p[2] < ball.radius_m and v[2] < 0:
            p = (p[0], p[1], 2 * ball.radius_m - p[2])
            v = (v[0] * ball.friction, v[1] * ball.friction, -v[2] * ball.restitution)
            s_i += 1
        if kicks and v[2] < 0 and p[2] < kicks[0][0]:
            v = tuple(map(float, kicks.pop(0)[1]))
            s_i += 1
    return t0 + dt * np.arange(n), out, seg


@dataclass
class Person:
    """A side-on figure whose feet move from (x, y) on the ground at (vx, vy) [m/s]."""
    x: float
    y: float
    vx: float = 0.0
    vy: float = 0.0
    height: float = 1.75
    shirt: tuple = (0.6, 0.05, 0.05)
    trousers: tuple = (0.05, 0.05, 0.12)
    skin: tuple = (0.45, 0.3, 0.22)
    cadence: float = 0.9  # strides a second
    stride: float = 0.45  # leg swing amplitude [rad]
    arm_swing: float = 0.5  # [rad]
    kicks: tuple = ()  # times [s] of a right-leg kick
    throw_at: float | None = None  # time [s] of a right-arm release
    phase: float = 0.0

    def strokes(self, t: float):
        """Body parts at time t: list of (start (3,), end (3,), width [m], colour)."""
        h, face = self.height, 1.0 if self.vx >= 0 else -1.0
        foot = np.array([self.x + self.vx * t, self.y + self.vy * t, 0.0])
        w = 2 * math.pi * self.cadence * t + self.phase
        hip, sh = foot + [0, 0, 0.52 * h], foot + [0, 0, 0.81 * h]
        parts = []

        def limb(top, a, bend, l1, l2, width, colour, yoff):
            top = top + [0, yoff, 0]
            knee = top + [face * l1 * math.sin(a), 0, -l1 * math.cos(a)]
            b = a + bend
            end = knee + [face * l2 * math.sin(b), 0, -l2 * math.cos(b)]
            parts.extend([(top, knee, width, colour), (knee, end, width * 0.85, colour)])

        for side in (-1, 1):
            a = side * self.stride * math.sin(w)
            if side == 1:
                a += sum(1.4 * math.exp(-((t - tk) / 0.12) ** 2) for tk in self.kicks)
            limb(hip, a, -0.5 * max(0.0, math.sin(w + side * 1.2)), 0.26 * h, 0.26 * h, 0.075 * h,
                 self.trousers, 0.06 * side)
        parts.append((hip, sh, 0.17 * h, self.shirt))
        for side in (-1, 1):
            a = -side * self.arm_swing * math.sin(w)
            if side == 1 and self.throw_at is not None:
                s = (t - self.throw_at) / 0.18
                a = -1.5 - 3.0 / (1 + math.exp(-3 * (s + 0.5))) if s > -3 else a  # overarm: back, up, forward
            limb(sh, a, 0.4, 0.17 * h, 0.16 * h, 0.05 * h, self.shirt if side < 0 else self.skin, 0.08 * side)
        parts.append((sh + [0, 0, 0.1 * h], sh + [0, 0, 0.11 * h], 0.13 * h, self.skin))
        return parts

    def hand(self, t):
        """Where the ball sits in the right hand at time t [m]: a little in front of the hand (towards -y)."""
        return self.strokes(t)[8][1] + [0.0, -0.15, 0.0]

    def depth_point(self, t):
        return np.array([self.x + self.vx * t, self.y + self.vy * t, 0.9])


@dataclass
class Style:
    """What the background is made of."""
    ground: str = "grass"  # grass | court | floor
    wall: str | None = None  # dark | brick | fence | trees
    wall_y: float = 30.0  # [m]
    lines: tuple = ()  # painted segments ((x0, y0), (x1, y1)) on the ground [m]
    brightness: float = 1.0
    sun: tuple = (-0.4, -0.5, 0.75)  # direction towards the light


@dataclass
class Shot:
    lens: Lens
    ball: Ball
    p0: tuple
    v0: tuple
    t_launch: float
    duration: float  # [s] of capture
    capture_fps: float
    container_fps: float
    shutter: float = 1 / 250  # [s]
    readout: float = 0.02  # top-to-bottom rolling-shutter time [s]
    kicks: tuple = ()
    style: Style = field(default_factory=Style)
    people: tuple = ()
    shake_px: float = 0.0
    follow: float = 0.0  # share of the ball's offset from the centre that a pan follows
    follow_lag: float = 0.35  # [s]
    roll_deg: float = 0.0
    auto_exposure: bool = True
    flicker: float = 0.0  # mains flicker amplitude (100 Hz)
    vignette: float = 0.3
    read_noise: float = 0.006
    bitrate: int = 2_000_000
    netting: bool = False
    cut_at: float | None = None  # container time of a scene cut [s]; before it another scene, no ball
    cut_style: Style | None = None
    cut_people: tuple = ()
    holder: int | None = None  # index in people of a thrower holding the ball before t_launch
    gap_at_cut: bool = True
    shadow: bool = True
    seed: int = 0


def _noise_tex(rng, n=256, slope=1.6):
    """Tileable noise with a 1/f^slope spectrum, zero mean, unit spread."""
    f = np.hypot(*np.meshgrid(np.fft.fftfreq(n), np.fft.rfftfreq(n), indexing="ij"))
    spec = (rng.standard_normal(f.shape) + 1j * rng.standard_normal(f.shape)) / np.maximum(f, 1.0 / n) ** slope
    tex = np.fft.irfft2(spec, (n, n)).astype(np.float32)
    return (tex - tex.mean()) / tex.std()


def _sample(tex, a, b):
    n = tex.shape[0]
    return cv2.remap(tex, (a * n % n).astype(np.float32), (b * n % n).astype(np.float32), cv2.INTER_LINEAR,
                     borderMode=cv2.BORDER_WRAP)


GROUNDS = {  # base colour (linear RGB), paint colour, texture: (fine, coarse, stripe) weights
    "grass": ((0.05, 0.15, 0.035), (0.8, 0.82, 0.8), (0.18, 0.15, 0.1)),
    "court": ((0.06, 0.16, 0.3), (0.85, 0.85, 0.85), (0.05, 0.05, 0.0)),
    "floor": ((0.12, 0.07, 0.035), (0.5, 0.45, 0.1), (0.12, 0.1, 0.2)),
}


def backdrop(lens: Lens, shape, offset, style: Style, rng) -> np.ndarray:
    """Ray-cast the static scene onto a canvas, shape (H, W) [px], whose pixel ``offset`` is the frame's (0, 0)."""
    hgt, wid = shape
    cx, cy = lens.centre
    u, v = np.meshgrid(np.arange(wid, dtype=np.float32) - offset[0], np.arange(hgt, dtype=np.float32) - offset[1])
    d = np.stack([(u - cx) / lens.f, (v - cy) / lens.f, np.ones_like(u)], -1) @ lens.rotation().astype(np.float32)
    d /= np.linalg.norm(d, axis=-1, keepdims=True)
    c, f32 = np.asarray(lens.pos, np.float32), np.float32
    tn1, tn2 = _noise_tex(rng), _noise_tex(rng)
    el = np.sqrt(np.clip(d[..., 2], 0, 1))[..., None]
    sky = np.array([0.78, 0.84, 0.9], f32) * (1 - el) + np.array([0.22, 0.4, 0.78], f32) * el
    h = d[..., 2] + 0.08  # clouds on a plane above the camera
    cl = np.clip(0.8 * _sample(tn1, d[..., 0] / h * 0.15, d[..., 1] / h * 0.15) - 0.2, 0, 1)[..., None]
    sky = sky * (1 - 0.85 * cl) + 0.81 * cl
    t_g = np.where(d[..., 2] < -1e-4, -c[2] / np.minimum(d[..., 2], -1e-4), np.inf)
    t_w = np.where(d[..., 1] > 1e-4, (style.wall_y - c[1]) / np.maximum(d[..., 1], 1e-4), np.inf)
    t_w = t_w if style.wall else np.full_like(t_g, np.inf)
    gx, gy = c[0] + t_g * d[..., 0], c[1] + t_g * d[..., 1]
    base, paint, (w1, w2, w3) = GROUNDS[style.ground]
    tone = 1 + w1 * _sample(tn1, gx * 0.7, gy * 0.7) + w2 * _sample(tn2, gx * 0.09, gy * 0.09)
    tone += w3 * (np.sin(np.floor(gy / 0.15) * 12.9898) if style.ground == "floor" else np.sign(np.sin(gy * 0.785)))
    ground = np.array(base, f32) * tone[..., None]
    for (x0, y0), (x1, y1) in style.lines:  # painted lines 0.1 m wide, covered by the share of each pixel
        ax, ay = x1 - x0, y1 - y0
        s = np.clip(((gx - x0) * ax + (gy - y0) * ay) / (ax * ax + ay * ay), 0, 1)
        dist = np.hypot(gx - x0 - s * ax, gy - y0 - s * ay)
        step = np.maximum(np.hypot(*np.gradient(dist)), 1e-4)  # ground length of a pixel across the line [m]
        m = (np.clip((0.05 - dist) / step + 0.5, 0, 1) * np.minimum(1, 0.1 / step))[..., None]
        ground = ground * (1 - m) + np.array(paint, f32) * m
    ground *= (0.6 + 0.5 * max(0.0, style.sun[2])) * (0.35 if style.wall == "dark" else 1.0)
    wx, wz = c[0] + t_w * d[..., 0], c[2] + t_w * d[..., 2]
    if style.wall == "dark":  # an unlit hall with a few lit panels
        wall = np.array([0.006, 0.0055, 0.005], f32) * (1 + 0.3 * _sample(tn2, wx * 0.2, wz * 0.2))[..., None]
        lit = ((np.abs((wx % 3.0) - 1.5) < 0.5) & (np.abs(wz - 1.8) < 0.4)).astype(f32)
        wall = wall + np.array([0.12, 0.1, 0.07], f32) * cv2.GaussianBlur(lit, (0, 0), 3)[..., None]
    elif style.wall == "brick":
        row = np.floor(wz / 0.075)
        mortar = (np.abs((wz % 0.075) - 0.037) > 0.03) | (np.abs(((wx + 0.11 * (row % 2)) % 0.22) - 0.11) > 0.1)
        wall = np.where(mortar[..., None], f32(0.3), np.array([0.25, 0.08, 0.05], f32)
                        * (1 + 0.25 * np.sin(row * 7.1 + np.floor(wx / 0.22) * 3.3))[..., None])
    else:  # trees with an uneven top, behind a chain-link fence up to 3.5 m if "fence"
        wall = np.array([0.03, 0.09, 0.03], f32) * (1 + 0.5 * _sample(tn1, wx * 0.4, wz * 0.4))[..., None]
        wall = np.where((wz > 6 + 2 * _sample(tn2, wx * 0.05, 0 * wx))[..., None], sky, wall)
        if style.wall == "fence":
            grid = np.minimum(np.abs(((wx + wz) % 0.06) - 0.03), np.abs(((wx - wz) % 0.06) - 0.03))
            wire = np.clip(1 - grid / np.maximum(t_w / lens.f, 1e-3) * 0.8, 0, 0.6)[..., None]
            wall = np.where((wz < 3.5)[..., None], wall * (1 - wire) + 0.35 * wire, wall)
    img = np.where((t_w < t_g)[..., None], wall, np.where(np.isfinite(t_g)[..., None], ground, sky))
    return cv2.GaussianBlur(np.nan_to_num(img * style.brightness).astype(f32), (0, 0), 0.7)  # the lens's own blur


_ICOSA = np.array([[0, 1, 1.618], [0, -1, 1.618], [0, 1, -1.618], [0, -1, -1.618], [1, 1.618, 0], [-1, 1.618, 0],
                   [1, -1.618, 0], [-1, -1.618, 0], [1.618, 0, 1], [-1.618, 0, 1], [1.618, 0, -1], [-1.618, 0, -1]])
_ICOSA = _ICOSA / np.linalg.norm(_ICOSA, axis=1, keepdims=True)


def ball_sprite(ball: Ball, r_px: float, orient: np.ndarray, light_cam: np.ndarray, ambient: float):
    """Premultiplied RGBA sprite of the shaded ball, radius r_px, centre at ((S - 1) / 2, (S - 1) / 2)."""
    size = 2 * int(math.ceil(r_px)) + 5
    ss = 5 if r_px < 6 else 3 if r_px < 25 else 2
    g = (np.arange(size * ss, dtype=np.float32) + 0.5) / ss - 0.5 - (size - 1) / 2
    x, y = np.meshgrid(g / r_px, g / r_px)
    inside = x * x + y * y <= 1
    z = -np.sqrt(np.clip(1 - x * x - y * y, 0, 1))
    n = np.stack([x, y, z], -1)
    body = n @ orient.astype(np.float32)  # camera normal -> ball frame (orient maps ball frame to camera)
    if ball.pattern == "panels":
        mark = (body @ _ICOSA.T.astype(np.float32)).max(-1) > 0.93
    elif ball.pattern == "seam":
        mark = np.abs(body[..., 0] ** 2 - body[..., 1] ** 2 - 0.55 * body[..., 2]) < 0.07
    else:
        mark = np.zeros_like(inside)
    alb = np.where(mark[..., None], np.float32(ball.marking), np.float32(ball.albedo))
    lam = np.clip(n @ light_cam.astype(np.float32), 0, 1)
    refl = 2 * lam[..., None] * n - light_cam.astype(np.float32)
    spec = 0.12 * np.clip(-refl[..., 2], 0, 1) ** 20 * (lam > 0)
    rgb = alb * (ambient + 0.9 * lam)[..., None] + spec[..., None]
    rgba = np.concatenate([rgb * inside[..., None], inside[..., None].astype(np.float32)], -1).astype(np.float32)
    return cv2.resize(rgba, (size, size), interpolation=cv2.INTER_AREA)


def _view_path(shot: Shot, times, tt, traj):
    """View motion on a time grid: canvas shift x, y [px] and roll [rad] under the frame (shake + following pan)."""
    rng = np.random.default_rng(shot.seed + 7)
    sx, sy = np.zeros_like(times), np.zeros_like(times)
    for amp, hz in ((1.0, 1.3), (0.5, 3.1), (0.3, 7.3)):
        sx += shot.shake_px * amp * np.sin(2 * math.pi * hz * times + rng.uniform(0, 6.3))
        sy += shot.shake_px * amp * np.sin(2 * math.pi * hz * 1.1 * times + rng.uniform(0, 6.3))
    if shot.follow:
        uv, _ = shot.lens.pinhole(_at(np.clip(times, tt[0], tt[-1]), tt, traj))
        target, a = shot.follow * (uv - np.asarray(shot.lens.centre)), 1 - math.exp(-1e-3 / shot.follow_lag)
        pan = lfilter([a], [1, a - 1], target - target[0], axis=0) + target[0]  # a first-order lag behind the ball
        sx, sy = sx + pan[:, 0], sy + pan[:, 1]
    return sx, sy, math.radians(shot.roll_deg) * np.sin(2 * math.pi * 0.6 * times + rng.uniform(0, 6.3))


def _at(t, tt, traj):
    """Ball positions at times t, shape (N,) [s] -> (N, 3) [m]."""
    return np.stack([np.interp(t, tt, traj[:, i]) for i in range(3)], -1)


def _netting(size, rng):
    """Transmission loss of an out-of-focus diamond mesh just in front of the lens, shape (H, W, 3)."""
    u, v = np.meshgrid(np.arange(size[0], dtype=np.float32), np.arange(size[1], dtype=np.float32))
    pitch, w = 0.1 * size[0], 0.012 * size[0]
    a, b = (u + v + rng.uniform(0, pitch)) % pitch, (u - v + rng.uniform(0, pitch)) % pitch
    net = ((np.minimum(a, pitch - a) < w) | (np.minimum(b, pitch - b) < w)).astype(np.float32)
    return np.repeat(cv2.GaussianBlur(net, (0, 0), w / 2)[..., None] * 0.55, 3, 2)


def render_shot(shot: Shot, path) -> list[dict]:
    """Render, encode to ``path`` (H.264 .mp4) and return the truth, one dict per container frame."""
    import av

    lens, ball, rng = shot.lens, shot.ball, np.random.default_rng(shot.seed)
    (wid, hgt), (cx, cy) = lens.size, lens.centre
    tt, traj, seg = fly(ball, shot.p0, shot.v0, shot.t_launch, max(shot.duration, shot.t_launch) + 0.2, shot.kicks)
    grid = np.arange(-0.05, shot.duration + 0.1, 1e-3)
    sx, sy, roll = _view_path(shot, grid, tt, traj)
    xn, yn = lens.undistort(np.broadcast_to((np.arange(wid, dtype=np.float32) - cx) / lens.f, (hgt, wid)),
                            np.broadcast_to((np.arange(hgt, dtype=np.float32)[:, None] - cy) / lens.f, (hgt, wid)))
    xu, yu = lens.f * xn, lens.f * yn  # undistorted pinhole offsets from the centre of every frame pixel [px]
    pad = np.abs(roll).max() * float(np.hypot(xu, yu).max()) + 12
    off = (float(pad - min(xu.min() + cx, 0) - min(sx.min(), 0)), float(pad - min(yu.min() + cy, 0) - min(sy.min(), 0)))
    shape = (int(off[1] + max(yu.max() + cy, hgt) + max(sy.max(), 0) + pad),
             int(off[0] + max(xu.max() + cx, wid) + max(sx.max(), 0) + pad))
    with np.errstate(invalid="ignore", over="ignore"):
        styles = (shot.style,) if shot.cut_at is None else (shot.style, shot.cut_style or Style())
        scenes = [backdrop(lens, shape, off, st, rng) for st in styles]
    rr2 = ((np.arange(wid) - cx) ** 2 + (np.arange(hgt)[:, None] - cy) ** 2) / (wid / 2) ** 2
    vig = np.repeat((1 - shot.vignette * rr2 / (1 + 0.3 * rr2)).astype(np.float32)[..., None], 3, 2)
    net = _netting(lens.size, rng) if shot.netting else None
    bank = rng.standard_normal((hgt + 32, wid + 32, 3), dtype=np.float32)
    rcam, sun = lens.rotation(), np.asarray(shot.style.sun, float) / np.linalg.norm(shot.style.sun)
    rate = Fraction(shot.container_fps).limit_denominator(1001)
    out = av.open(str(path), "w")
    st = out.add_stream("libx264", rate=rate)
    st.width, st.height, st.pix_fmt, st.bit_rate = wid, hgt, "yuv420p", shot.bitrate
    st.codec_context.gop_size = max(1, round(shot.container_fps))
    st.options = {"preset": "superfast"}
    truth, last_e, gain, pts, occl, maps = [], None, None, 0, 0.0, None
    moving = bool(np.ptp(sx) or np.ptp(sy) or np.ptp(roll))

    def to_frame(c, t):  # canvas points (N, 2) -> frame pixels (N, 2), through the view at time t
        s_x, s_y, th = np.interp(t, grid, sx), np.interp(t, grid, sy), np.interp(t, grid, roll)
        dx, dy = c[:, 0] - off[0] - s_x - cx, c[:, 1] - off[1] - s_y - cy
        xd, yd = lens.distort((math.cos(th) * dx + math.sin(th) * dy) / lens.f,
                              (-math.sin(th) * dx + math.cos(th) * dy) / lens.f)
        return np.stack([cx + lens.f * xd, cy + lens.f * yd], 1)

    for k in range(round(shot.duration * shot.container_fps)):
        t_k = k / shot.container_fps
        cut = shot.cut_at is not None and t_k >= shot.cut_at
        pre_cut = shot.cut_at is not None and not cut
        pts += int(cut and truth != [] and not truth[-1]["cut"])  # a one-frame gap in the times at the cut
        e = math.floor(t_k * shot.capture_fps + 1e-6)
        te = e / shot.capture_fps
        row = {"frame": k, "t": float(pts / rate), "exposure": e, "repeat": e == last_e, "cut": cut, "visible": False}
        held = shot.holder is not None and not pre_cut and te + shot.shutter < shot.t_launch
        ball_on, b_tt, b_traj = not pre_cut and (held or te + shot.shutter >= shot.t_launch), tt, traj
        if held:  # before the release the ball moves with the thrower's right hand (not a flight: not visible)
            b_tt = te + np.linspace(-0.01, shot.shutter + shot.readout + 0.01, 16)
            b_traj = np.array([shot.people[shot.holder].hand(t) for t in b_tt])
        if ball_on:  # the ball's row sets its time (rolling shutter): iterate
            v_g = cy
            for _ in range(3):
                t_c = te + shot.readout * v_g / hgt + shot.shutter / 2
                ts = t_c + shot.shutter * (np.linspace(0, 1, 9) - 0.5)
                cvs, dep = lens.pinhole(_at(ts, b_tt, b_traj))
                fr = to_frame(cvs + off, t_c)
                v_g = float(fr[:, 1].mean())
            mid = _at(t_c, b_tt, b_traj)
            xm, ym, zm = lens.to_camera(mid)[0]
            r_px = lens.f * ball.radius_m / zm * float(lens.magnification(xm / zm, ym / zm))
            i_c = min(np.searchsorted(tt, t_c), seg.size - 1)
            row.update(u=float(fr[:, 0].mean()), v=v_g, r=r_px, segment=-1 if held else int(seg[i_c]))
            inside = (dep.min() > 0.2 and fr[:, 0].min() >= r_px and fr[:, 0].max() + r_px <= wid - 1
                      and fr[:, 1].min() >= r_px and fr[:, 1].max() + r_px <= hgt - 1)
        if e != last_e:
            canvas = scenes[int(pre_cut)].copy()
            t_m = te + shot.readout / 2 + shot.shutter / 2
            people = sorted(shot.cut_people if pre_cut else shot.people,
                            key=lambda p: -lens.to_camera(p.depth_point(t_m))[0, 2])
            near = [p for p in people if ball_on and lens.to_camera(p.depth_point(t_m))[0, 2] < zm]
            for p in people:
                if p not in near:
                    _draw_person(canvas, p, t_m, lens, off)
            occl = _draw_ball(canvas, shot, mid, t_c, rcam, sun, off, near, b_tt, b_traj) if ball_on else 0.0
            for p in near:
                _draw_person(canvas, p, t_m, lens, off)
            t_rows = te + shot.readout * np.arange(hgt, dtype=np.float32)[:, None] / hgt + shot.shutter / 2
            if maps is None or moving:  # view motion, rolling shutter and distortion: one remap
                s_x, s_y, th = np.interp(t_rows, grid, sx), np.interp(t_rows, grid, sy), np.interp(t_rows, grid, roll)
                ct, sn = np.cos(th).astype(np.float32), np.sin(th).astype(np.float32)
                maps = (ct * xu - sn * yu + (cx + s_x + off[0]).astype(np.float32),
                        sn * xu + ct * yu + (cy + s_y + off[1]).astype(np.float32))
            img = cv2.remap(canvas, *maps, cv2.INTER_LINEAR, borderMode=cv2.BORDER_REFLECT)
            target = float(np.clip(0.14 / max(float((img * vig)[::16, ::16].mean()), 1e-3), 0.3, 4.0))
            if gain is None or (cut and not truth[-1]["cut"]):
                gain = target
            elif shot.auto_exposure:  # auto-exposure follows the scene with a lag of 0.5 s
                gain += (target - gain) * (1 - math.exp(-1 / shot.capture_fps / 0.5))
            fac = vig * np.float32(gain)
            if shot.flicker:  # 100 Hz mains flicker, banded by the rolling shutter
                fac = fac * (1 + shot.flicker * np.sin(2 * math.pi * 100 * t_rows)).astype(np.float32)[..., None]
            img = cv2.multiply(img, fac)
            if net is not None:
                img = cv2.add(cv2.multiply(img, 1 - net), 0.3 * net)
            oy, ox = rng.integers(0, 32, 2)  # shot + read noise
            sd = cv2.add(cv2.sqrt(cv2.max(img, 0.0) * np.float32(0.0008 * gain)), float(shot.read_noise * gain))
            img = cv2.scaleAdd(cv2.multiply(sd, bank[oy:oy + hgt, ox:ox + wid]), float(rng.choice([-1.0, 1.0])), img)
            img8 = cv2.convertScaleAbs(cv2.sqrt(cv2.max(img, 0.0)), alpha=255.0)  # square-root tone curve
            last_e = e
        row["visible"] = bool(ball_on and not held and inside and occl < 0.2)
        frame = av.VideoFrame.from_ndarray(img8, format="rgb24")
        frame.pts = pts
        out.mux(st.encode(frame))
        truth.append(row)
        pts += 1
    out.mux(st.encode())
    out.close()
    return truth


def _draw_person(canvas, person: Person, t, lens: Lens, off, mask_off=None):
    """Draw a figure's strokes (or, with ``mask_off``, their cover into a mask whose origin is mask_off)."""
    for a, b, w, col in person.strokes(t):
        uv, dep = lens.pinhole(np.stack([a, b]))
        if dep.min() < 0.3:
            continue
        uv = np.round((uv + off - (0 if mask_off is None else mask_off)) * 8).astype(int)  # 3 fraction bits
        colour = (1.0,) * 3 if mask_off is not None else tuple(0.55 * float(c) for c in col)  # diffuse share lit
        cv2.line(canvas, tuple(map(int, uv[0])), tuple(map(int, uv[1])), colour, max(1, round(w * lens.f / dep.mean())),
                 cv2.LINE_AA, 3)


def _draw_ball(canvas, shot: Shot, mid, t_c, rcam, sun, off, near, tt, traj):
    """Draw the ball (and its ground shadow) on the canvas over the exposure; return its hidden share."""
    ball, lens = shot.ball, shot.lens
    zm = lens.to_camera(mid)[0, 2]
    if zm < 0.2:
        return 1.0
    foot = mid - mid[2] / max(sun[2], 0.2) * sun  # where the sun's ray through the ball meets the ground
    sh, zs = lens.pinhole(np.array([[foot[0], foot[1], 0.0]]))
    if shot.shadow and shot.style.wall != "dark" and zs[0] > 0.3:  # a soft shadow on the ground
        rs, (px, py) = max(1.0, lens.f * ball.radius_m * 1.2 / zs[0]), sh[0] + off
        x0, y0 = max(int(px - 3 * rs), 0), max(int(py - 2 * rs), 0)
        sub = canvas[y0:max(int(py + 2 * rs) + 2, 0), x0:max(int(px + 3 * rs) + 2, 0)]
        yy, xx = np.mgrid[y0:y0 + sub.shape[0], x0:x0 + sub.shape[1]]
        dark = 0.45 * math.exp(-mid[2] / 2.0)
        sub *= (1 - dark * np.exp(-((xx - px) ** 2 + (3 * (yy - py)) ** 2) / rs ** 2))[..., None]
    vel = np.array([-1.0, 1.0]) @ lens.pinhole(_at(np.array([t_c - 1e-3, t_c + 1e-3]), tt, traj))[0] / 2e-3
    n = int(np.clip(math.ceil(float(np.hypot(*vel)) * shot.shutter / 0.6) + 1, 1, 80))  # samples over the shutter
    cvs = lens.pinhole(_at(t_c + shot.shutter * ((np.arange(n) + 0.5) / n - 0.5), tt, traj))[0] + off
    axis = np.asarray(ball.spin_axis, float) / np.linalg.norm(ball.spin_axis)
    orient = rcam @ cv2.Rodrigues(axis * 2 * math.pi * ball.spin_rps * t_c)[0]
    amb = 0.12 if shot.style.wall == "dark" else 0.35
    spr = ball_sprite(ball, lens.f * ball.radius_m / zm, orient, rcam @ sun, amb)
    s = spr.shape[0]
    lo = np.maximum(np.floor(cvs.min(0) - s), 0).astype(int)
    hi = np.minimum(np.ceil(cvs.max(0) + s), [canvas.shape[1], canvas.shape[0]]).astype(int)
    if np.any(hi <= lo):
        return 1.0
    acc, k = np.zeros((hi[1] - lo[1], hi[0] - lo[0], 4), np.float32), shot.readout / lens.size[1]
    a = np.array([[1.0, vel[0] * k], [0.0, 1.0 + vel[1] * k]])  # rolling-shutter shear of the moving ball
    for c in cvs:
        m = np.hstack([a, (c - lo - a @ [(s - 1) / 2, (s - 1) / 2])[:, None]])
        acc += cv2.warpAffine(spr, m, (acc.shape[1], acc.shape[0]), flags=cv2.INTER_LINEAR, borderValue=0)
    acc /= n
    sub = canvas[lo[1]:hi[1], lo[0]:hi[0]]
    sub *= 1 - acc[..., 3:]
    sub += acc[..., :3]
    mask = np.zeros(acc.shape[:2], np.float32)
    for p in near:
        _draw_person(mask, p, t_c, lens, off, mask_off=lo)
    cover = acc[..., 3] > 0.5
    return float(mask[cover].mean()) if cover.any() else 0.0
