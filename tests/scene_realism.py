"""A renderer of harder, more realistic ball clips, written independently of balltraj's vision code.

Nothing here imports balltraj: the trajectory comes from scipy's solve_ivp with a quadratic drag and
a constant-coefficient lift law, the projection is a pinhole with one radial distortion term written
below, and the picture is drawn with numpy and encoded as H.264 by PyAV at phone bitrates.

What a clip can contain (all optional, set in :class:`Shot`): a shaded textured sphere with a seam
turning with its spin, motion blur over the exposure (long streaks at slow shutters), a bright sky
(the ball darker than it) or a dark ground, people-sized figures walking with swinging arms, netting
in front of the lens, hand-held shake and drift, sensor noise, capture at one rate stored at another
(repeated or dropped frames), a scene cut, and a bounce.

``render_shot(shot, path)`` writes the clip and returns per stored frame a dict with the container
time ``t``, the capture exposure index ``exposure`` (equal for repeated frames), ``repeat`` (this
frame shows the same exposure as the previous one), ``cut`` (first frame after a scene cut) and, when
the ball is wholly inside the frame, its true centre ``u, v`` and apparent radius ``r`` [px].
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field

import av
import numpy as np
from scipy.integrate import solve_ivp

G = 9.81  # m/s^2 (standard gravity)
RHO = 1.2  # kg/m^3, air near sea level (common practice)


@dataclass
class Ball:
    radius_m: float
    mass_kg: float
    cd: float  # drag coefficient (held constant: a simpler law than balltraj's)
    cl: float  # lift coefficient along spin x velocity
    colour: tuple = (235, 235, 235)  # BGR albedo x 255
    seam: tuple = (40, 40, 200)
    cor: float = 0.7  # coefficient of restitution of the up-down speed at a bounce
    friction: float = 0.8  # horizontal speed kept at a bounce


BASEBALL = Ball(0.0366, 0.145, 0.35, 0.20, (225, 230, 235), (50, 50, 190))  # Source: (from memory) Cd~0.35
TENNIS = Ball(0.0335, 0.058, 0.55, 0.10, (60, 225, 215), (235, 235, 235), cor=0.75, friction=0.75)
SOCCER = Ball(0.11, 0.43, 0.25, 0.15, (230, 230, 230), (30, 30, 30))


def fly(ball: Ball, p0, v0, spin_axis=(0, 0, 0), t_end=2.0, bounce=True):
    """Integrate the flight with scipy (RK45, tight tolerances); bounces on z = radius. Returns a
    function t -> positions (N, 3) [m] for t in [0, t_end]."""
    axis = np.asarray(spin_axis, float)
    k_d = 0.5 * RHO * ball.cd * math.pi * ball.radius_m**2 / ball.mass_kg
    k_l = 0.5 * RHO * ball.cl * math.pi * ball.radius_m**2 / ball.mass_kg

    def rhs(_t, s):
        v = s[3:]
        sp = np.linalg.norm(v)
        a = -k_d * sp * v + np.array([0.0, 0.0, -G])
        if np.any(axis):
            a = a + k_l * sp * np.cross(axis, v)
        return np.concatenate([v, a])

    def ground(_t, s):
        return s[2] - ball.radius_m
    ground.terminal, ground.direction = True, -1
    segs, t0, s0 = [], 0.0, np.concatenate([p0, v0]).astype(float)
    while t0 < t_end:
        sol = solve_ivp(rhs, (t0, t_end), s0, events=ground if bounce else None, dense_output=True,
                        rtol=1e-9, atol=1e-9)
        segs.append((t0, sol.t[-1], sol.sol))
        if sol.status != 1:
            break
        s0 = sol.y[:, -1].copy()
        s0[5] = -ball.cor * s0[5]
        s0[3:5] *= ball.friction
        s0[2] = ball.radius_m + 1e-6
        t0 = sol.t[-1]
        if abs(s0[5]) < 0.5:
            break

    def pos(t):
        t = np.atleast_1d(np.asarray(t, float))
        out = np.full((len(t), 3), np.nan)
        for a, b, f in segs:
            m = (t >= a) & (t <= b)
            if m.any():
                out[m] = f(t[m])[:3].T
        return out
    bounces = [b for _, b, _ in segs[:-1]]
    return pos, bounces


@dataclass
class Cam:
    """Pinhole camera looking from ``centre`` at ``target`` (z up), focal length [px], one radial
    distortion coefficient k1 (x_d = x (1 + k1 r^2))."""
    centre: tuple
    target: tuple
    focal: float
    size: tuple  # (w, h)
    k1: float = 0.0

    def __post_init__(self):
        c, t = np.asarray(self.centre, float), np.asarray(self.target, float)
        z = (t - c) / np.linalg.norm(t - c)
        x = np.cross(z, [0, 0, 1.0])
        x /= np.linalg.norm(x)
        y = np.cross(z, x)
        self.R = np.stack([x, y, z])
        self.c = c

    def project(self, X):
        """World (N, 3) -> (u, v, apparent radius factor per metre, depth). The radius of a ball of
        radius R is R * f / depth times the lens's local magnification (sqrt of the Jacobian
        determinant of the distortion)."""
        Xc = (np.atleast_2d(X) - self.c) @ self.R.T
        d = Xc[:, 2]
        x, y = Xc[:, 0] / d, Xc[:, 1] / d
        r2 = x * x + y * y
        s = 1 + self.k1 * r2
        mag = np.sqrt(np.abs(s * (s + 2 * self.k1 * r2)))  # radial map r -> r s(r): det = s (s + r s')
        u = self.focal * x * s + self.size[0] / 2
        v = self.focal * y * s + self.size[1] / 2
        return u, v, self.focal * mag / d, d


@dataclass
class Person:
    x0: float  # start column [px]
    speed: float  # px/s
    height: float  # px, feet to head
    foot_v: float  # row of the feet [px]
    shirt: tuple = (40, 60, 170)
    arm_hz: float = 1.5
    jump: bool = False


@dataclass
class Shot:
    cam: Cam
    ball: Ball
    flights: list  # [(start_s, p0, v0, spin_axis)]
    duration_s: float = 1.5
    capture_fps: float = 240.0
    stored_fps: float | None = None  # container rate (repeats or drops frames when != capture_fps)
    exposure_s: float = 1 / 1000
    sky: bool = True  # bright sky in the upper part, ball darker than it
    people: list = field(default_factory=list)
    netting: bool = False
    shake_px: float = 0.0  # rms frame-to-frame jitter at 30 frames/s [px]
    drift_px_s: tuple = (0.0, 0.0)  # steady pan [px/s]
    noise: float = 2.0  # grey levels rms
    bitrate: int = 2_000_000  # bits/s
    cut_at_s: float | None = None  # a scene cut (another view) from this time on
    seed: int = 0


def _background(w, h, sky, rng):
    yy = np.arange(h)[:, None] / h
    if sky:
        horizon = 0.55
        sky_img = 215 + 25 * (1 - yy / horizon)  # brighter towards the top
        ground = 95 + 25 * rng.standard_normal((h, w)).clip(-2, 2) * 0.4
        g = np.where(yy < horizon, sky_img, ground)
        bgr = np.stack([g * 1.02, g * 0.98, g * 0.92], axis=-1)  # bluish sky
        bgr[int(horizon * h):, :, 0] *= 0.6  # greenish ground
        bgr[int(horizon * h):, :, 2] *= 0.7
    else:
        g = 70 + 10 * rng.standard_normal((h // 8 + 1, w // 8 + 1))
        g = np.kron(g, np.ones((8, 8)))[:h, :w] + 4 * rng.standard_normal((h, w))
        bgr = np.stack([g * 0.7, g * 1.1, g * 0.8], axis=-1)
    # a few static objects (poles, a fence rail) for clutter
    for _ in range(4):
        x = int(rng.uniform(0, w))
        bgr[int(0.3 * h):, x:x + max(2, w // 200)] = rng.uniform(30, 90)
    bgr[int(0.62 * h):int(0.62 * h) + max(2, h // 150)] = 180
    return bgr.astype(np.float32)


def _draw_person(img, p: Person, t, rng_shirt):
    import cv2
    x = p.x0 + p.speed * t
    lift = 0.0
    if p.jump:
        ph = (t % 1.2) / 1.2  # a jump every 1.2 s (a parabola in time)
        lift = 4 * 0.25 * p.height * ph * (1 - ph)
    foot = p.foot_v - lift
    H = p.height
    hip = (x, foot - 0.48 * H)
    neck = (x, foot - 0.82 * H)
    th = max(2, int(0.07 * H))
    col = tuple(float(c) for c in p.shirt)
    skin = (120.0, 150.0, 200.0)
    cv2.line(img, (int(x), int(foot - 0.8 * H)), (int(x), int(hip[1])), col, int(0.2 * H))  # torso
    cv2.circle(img, (int(x), int(foot - 0.92 * H)), int(0.08 * H), skin, -1)
    sw = math.sin(2 * math.pi * p.arm_hz * t)
    for s in (-1, 1):
        a = 0.9 * s * sw
        hand = (neck[0] + 0.38 * H * math.sin(a), neck[1] + 0.38 * H * math.cos(a))
        cv2.line(img, (int(neck[0]), int(neck[1])), (int(hand[0]), int(hand[1])), skin, th)
        leg = (hip[0] + 0.45 * H * math.sin(0.5 * s * sw), hip[1] + 0.45 * H * math.cos(0.5 * s * sw))
        cv2.line(img, (int(hip[0]), int(hip[1])), (int(leg[0]), int(leg[1])), (60.0, 50.0, 50.0), th + 2)


def _ball_layer(shot: Shot, pos_fn, t_mid, spin_axis, angle0):
    """Supersampled, motion-blurred, shaded ball: (x0, y0, colour*coverage (h, w, 3), coverage
    (h, w)) or None, and the truth (u, v, r) at mid-exposure."""
    cam, ball = shot.cam, shot.ball
    n_sub = 5
    ts = t_mid + (np.arange(n_sub) + 0.5 - n_sub / 2) / n_sub * shot.exposure_s
    P = pos_fn(ts)
    if np.isnan(P).any():
        return None, None
    u, v, fpm, d = cam.project(P)
    if np.any(d < 0.3):
        return None, None
    r = ball.radius_m * fpm
    step = float(np.hypot(u[-1] - u[0], v[-1] - v[0]))
    n = int(min(40, max(n_sub, math.ceil(2 * step / max(r.mean(), 0.7)))))
    if n > n_sub:
        ts = t_mid + (np.arange(n) + 0.5 - n / 2) / n * shot.exposure_s
        P = pos_fn(ts)
        u, v, fpm, d = cam.project(P)
        r = ball.radius_m * fpm
    um, vm, _, _ = cam.project(pos_fn([t_mid]))
    truth = (float(um[0]), float(vm[0]), float(ball.radius_m * cam.project(pos_fn([t_mid]))[2][0]))
    x0, x1 = int(math.floor(min(u - r))) - 2, int(math.ceil(max(u + r))) + 2
    y0, y1 = int(math.floor(min(v - r))) - 2, int(math.ceil(max(v + r))) + 2
    W, H = cam.size
    if x1 < 0 or y1 < 0 or x0 >= W or y0 >= H:
        return None, truth
    ss = 4
    # pixel i covers [i - 0.5, i + 0.5) (its centre at i, as in OpenCV)
    gx = x0 - 0.5 + (np.arange((x1 - x0) * ss) + 0.5) / ss
    gy = y0 - 0.5 + (np.arange((y1 - y0) * ss) + 0.5) / ss
    XX, YY = np.meshgrid(gx, gy)
    col = np.zeros(XX.shape + (3,), np.float32)
    cov = np.zeros(XX.shape, np.float32)
    light = np.array([-0.4, -0.7, -0.6])
    light /= np.linalg.norm(light)
    base, seam = np.asarray(ball.colour, float), np.asarray(ball.seam, float)
    for i in range(len(ts)):
        dx, dy = (XX - u[i]) / r[i], (YY - v[i]) / r[i]
        rr = dx * dx + dy * dy
        m = rr < 1.0
        if not m.any():
            continue
        nz = -np.sqrt(np.clip(1 - rr[m], 0, 1))
        nx, ny = dx[m], dy[m]
        # texture: a seam (a curve on the sphere) turning with the spin
        ang = angle0 + 60.0 * ts[i]
        ca, sa = math.cos(ang), math.sin(ang)
        px, pz = ca * nx + sa * nz, -sa * nx + ca * nz
        seam_w = np.abs(pz - 0.35 * np.sin(2.0 * np.arctan2(ny, px))) < 0.08
        alb = np.where(seam_w[:, None], seam, base)
        shade = 0.35 + 0.65 * np.clip(nx * light[0] + ny * light[1] + nz * light[2], 0, 1)
        col[m] += (alb * shade[:, None] * 0.92).astype(np.float32)
        cov[m] += 1.0
    col /= len(ts)
    cov /= len(ts)
    # back to pixel resolution
    h, w = (y1 - y0), (x1 - x0)
    col = col.reshape(h, ss, w, ss, 3).mean(axis=(1, 3))
    cov = cov.reshape(h, ss, w, ss).mean(axis=(1, 3))
    return (x0, y0, col, cov), truth


def render_shot(shot: Shot, path) -> list[dict]:
    import cv2
    rng = np.random.default_rng(shot.seed)
    W, H = shot.cam.size
    m = 24  # margin for shake
    bg = [_background(W + 2 * m, H + 2 * m, shot.sky, rng)]
    if shot.cut_at_s is not None:
        bg.append(_background(W + 2 * m, H + 2 * m, not shot.sky, np.random.default_rng(shot.seed + 99)))
    flights = []
    for start, p0, v0, axis in shot.flights:
        f, _ = fly(shot.ball, np.asarray(p0, float), np.asarray(v0, float), axis, t_end=shot.duration_s)
        flights.append((start, f, axis, rng.uniform(0, 6)))
    stored = shot.stored_fps or shot.capture_fps
    n_out = int(round(shot.duration_s * stored))
    net = None
    if shot.netting:
        net = np.zeros((H + 2 * m, W + 2 * m), np.float32)
        pitch = max(6, W // 40)
        net[::pitch, :] = 1.0
        net[:, ::pitch] = 1.0
    container = av.open(str(path), mode="w")
    stream = container.add_stream("libx264", rate=int(round(stored)) if abs(stored - round(stored)) < 1e-6 else
                                  __import__("fractions").Fraction(round(stored * 1001), 1001))
    stream.width, stream.height, stream.pix_fmt = W, H, "yuv420p"
    stream.bit_rate = shot.bitrate
    stream.options = {"preset": "veryfast", "bf": "0"}
    truth, last_exp, frame_cache = [], None, None
    off = np.zeros(2)
    for j in range(n_out):
        t_store = j / stored
        exp_idx = int(math.floor(t_store * shot.capture_fps + 1e-6))
        t_cap = exp_idx / shot.capture_fps
        row = {"t": t_store, "exposure": exp_idx, "repeat": exp_idx == last_exp, "cut": False}
        if exp_idx != last_exp:
            dt_cap = 1.0 / shot.capture_fps
            off = off + rng.standard_normal(2) * shot.shake_px * math.sqrt(30.0 * dt_cap) \
                + np.asarray(shot.drift_px_s) * dt_cap * (1 if last_exp is not None else 0)
            scene = 1 if (shot.cut_at_s is not None and t_cap >= shot.cut_at_s) else 0
            img = bg[scene].copy()
            for p in shot.people:
                _draw_person(img, Person(p.x0 + m, p.speed, p.height, p.foot_v + m, p.shirt, p.arm_hz, p.jump),
                             t_cap, rng)
            ball_truth = None
            if scene == 0:
                for start, f, axis, a0 in flights:
                    if t_cap < start:
                        continue
                    layer, tr = _ball_layer(shot, lambda ts, f=f, s=start: f(np.asarray(ts) - s), t_cap, axis, a0)
                    if layer is None:
                        continue
                    x0, y0, col, cov = layer
                    x0 += m
                    y0 += m
                    ys, xs = slice(max(0, y0), min(H + 2 * m, y0 + cov.shape[0])), slice(max(0, x0), min(W + 2 * m, x0 + cov.shape[1]))
                    cy, cx = slice(ys.start - y0, ys.stop - y0), slice(xs.start - x0, xs.stop - x0)
                    img[ys, xs] = img[ys, xs] * (1 - cov[cy, cx, None]) + col[cy, cx]
                    ball_truth = (tr, f, start)
            # camera shake: a shift of the whole view (and a tiny rotation)
            ang = 0.02 * off[0] / max(shot.shake_px, 1e-9) if shot.shake_px else 0.0
            A = cv2.getRotationMatrix2D((W / 2 + m, H / 2 + m), ang * 0.05, 1.0)
            A[:, 2] += off - m
            frame = cv2.warpAffine(img, A, (W, H), flags=cv2.INTER_LINEAR)
            if net is not None:
                nt = cv2.warpAffine(net, A, (W, H), flags=cv2.INTER_LINEAR)  # shake is mostly rotation: no parallax
                frame = frame * (1 - 0.45 * nt[..., None]) + 20 * 0.45 * nt[..., None]
            frame += rng.standard_normal(frame.shape[:2])[..., None].astype(np.float32) * shot.noise
            frame += np.sqrt(np.clip(frame, 0, 255) / 255.0) * rng.standard_normal(frame.shape).astype(np.float32) \
                * shot.noise * 0.5
            frame8 = np.clip(frame, 0, 255).astype(np.uint8)
            if ball_truth is not None:
                (u, v, r), _, _ = ball_truth
                uc = A[0, 0] * (u + m) + A[0, 1] * (v + m) + A[0, 2]
                vc = A[1, 0] * (u + m) + A[1, 1] * (v + m) + A[1, 2]
                if r <= uc <= W - 1 - r and r <= vc <= H - 1 - r:
                    row.update(u=float(uc), v=float(vc), r=float(r))
            row["view_shift"] = (float(off[0]), float(off[1]))
            row["cut"] = bool(shot.cut_at_s is not None and last_exp is not None
                              and (last_exp / shot.capture_fps) < shot.cut_at_s <= t_cap)
            frame_cache = frame8
        else:
            prev = truth[-1]
            for k in ("u", "v", "r", "view_shift"):
                if k in prev:
                    row[k] = prev[k]
        last_exp = exp_idx
        truth.append(row)
        vf = av.VideoFrame.from_ndarray(frame_cache, format="bgr24")
        for pkt in stream.encode(vf):
            container.mux(pkt)
    for pkt in stream.encode():
        container.mux(pkt)
    container.close()
    return truth
