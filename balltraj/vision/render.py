"""A synthetic practice clip of our own: a field with texture and markings, static bright clutter,
a slowly walking figure, a lighting gradient, the ball with motion blur over the exposure, sensor
noise and video compression; written with its truth (the ball's centre in pixels and in metres).

Used to build the demo clips and to test the tracker against known answers.
"""

from __future__ import annotations

from dataclasses import dataclass, field

import cv2
import numpy as np

from ..camera.model import Camera


@dataclass(frozen=True)
class Scene:
    camera: Camera
    fps: float = 240.0
    duration_s: float = 1.5
    exposure_s: float = 1 / 1000
    noise: float = 2.0
    ball_radius_m: float = 0.0369
    ball_grey: float = 235.0
    walker: bool = True
    clutter: int = 6
    seed: int = 0
    flights: list = field(default_factory=list)  # [(t_start, t_end, positions_fn(t)->(T,3))]


def field_background(cam: Camera, rng) -> np.ndarray:
    """Grass with mowing stripes and a few painted lines, seen by ``cam`` (BGR float)."""
    w, h = cam.image_size
    uu, vv = np.meshgrid(np.arange(w) + 0.0, np.arange(h) + 0.0)  # pixel centres at integers (OpenCV)
    origin, d = cam.rays(np.stack([uu, vv], axis=-1))
    s = -origin[2] / np.where(d[..., 2] < -1e-6, d[..., 2], np.nan)  # ground z = 0
    P = origin + d * s[..., None]
    ground = np.isfinite(s) & (s > 0) & (s < 400)
    img = np.empty((h, w, 3))
    sky = np.array([210.0, 190.0, 160.0])  # BGR: pale sky
    img[:] = sky - 40 * (vv / h)[..., None]
    stripes = (np.floor(np.nan_to_num(P[..., 0]) / 4.0) % 2)
    g = np.array([55.0, 120.0, 60.0]) + stripes[..., None] * np.array([6.0, 14.0, 6.0])
    tex = rng.normal(0, 8, (h // 2 + 1, w // 2 + 1))
    tex = cv2.resize(cv2.GaussianBlur(tex, (0, 0), 0.8), (w, h), interpolation=cv2.INTER_LINEAR)
    grass = g + tex[..., None] * np.array([0.5, 1.0, 0.5])
    lines = np.zeros((h, w), bool)
    for x0 in (0.0, 18.44, 25.0):
        lines |= np.abs(np.nan_to_num(P[..., 0], nan=1e9) - x0) < 0.05
    lines |= np.abs(np.nan_to_num(P[..., 1], nan=1e9) - 4.0) < 0.05
    grass[lines] = 225.0
    img[ground] = grass[ground]
    # lighting gradient (late sun from the left)
    img *= (0.85 + 0.3 * (uu / w))[..., None]
    return img


def _clutter(img, rng, n):
    h, w = img.shape[:2]
    for _ in range(n):  # static bright objects: cones, a water bottle, a ball bag
        x, y = int(rng.uniform(0.05, 0.95) * w), int(rng.uniform(0.55, 0.95) * h)
        r = int(rng.uniform(4, 14))
        col = rng.choice([250.0, 235.0, 30.0])
        cv2.circle(img, (x, y), r, (col, col, col if col > 100 else 230.0), -1, lineType=cv2.LINE_AA)


def _draw_ball(acc, centres_px, radii_px, grey):
    """Average a bright disc over the sub-exposure positions into ``acc`` (alpha compositing)."""
    h, w = acc.shape[:2]
    n = len(centres_px)
    if n == 0:
        return
    x0 = int(max(0, np.floor(np.min(centres_px[:, 0] - radii_px) - 2)))
    x1 = int(min(w, np.ceil(np.max(centres_px[:, 0] + radii_px) + 3)))
    y0 = int(max(0, np.floor(np.min(centres_px[:, 1] - radii_px) - 2)))
    y1 = int(min(h, np.ceil(np.max(centres_px[:, 1] + radii_px) + 3)))
    if x1 <= x0 or y1 <= y0:
        return
    yy, xx = np.mgrid[y0:y1, x0:x1].astype(float)
    alpha = np.zeros(xx.shape)
    shade = np.zeros(xx.shape)
    for (cx, cy), r in zip(centres_px, radii_px):
        d = np.hypot(xx - cx, yy - cy)
        a = np.clip(r + 0.5 - d, 0, 1)  # anti-aliased edge
        alpha += a / n
        shade += a * (1 - 0.25 * (d / max(r, 1e-6)) ** 2) / n  # darker limb
    col = grey * np.where(alpha > 0, shade / np.maximum(alpha, 1e-9), 1.0)
    roi = acc[y0:y1, x0:x1]
    roi[:] = roi * (1 - alpha[..., None]) + (alpha * col)[..., None]


def render_clip(scene: Scene, out_path, fourcc: str = "mp4v", progress=None) -> list[dict]:
    """Render the scene into ``out_path``; returns the truth rows (t, flight, u, v, radius_px, x, y, z)."""
    cam = scene.camera
    rng = np.random.default_rng(scene.seed)
    w, h = cam.image_size
    base = field_background(cam, rng).astype(np.float32)
    _clutter(base, rng, scene.clutter)
    # a bank of sensor-noise frames, cycled with random shifts (fast, still random-looking)
    bank = [rng.normal(0, scene.noise, base.shape).astype(np.float32) for _ in range(4)]
    writer = cv2.VideoWriter(str(out_path), cv2.VideoWriter_fourcc(*fourcc), scene.fps, (w, h))
    if not writer.isOpened():
        raise RuntimeError(f"OpenCV cannot write {fourcc} video to {out_path}")
    n = int(round(scene.duration_s * scene.fps))
    truth = []
    sub = 9
    for k in range(n):
        t = k / scene.fps
        img = base.copy()
        if scene.walker:  # a figure walking slowly across the far side
            x = int((0.15 + 0.25 * t / max(scene.duration_s, 1e-9)) * w)
            cv2.rectangle(img, (x, int(0.38 * h)), (x + int(0.025 * w), int(0.55 * h)), (60, 60, 170), -1)
            cv2.circle(img, (x + int(0.0125 * w), int(0.36 * h)), int(0.012 * w), (150, 170, 200), -1)
        for fi, (t0, t1, pos_fn) in enumerate(scene.flights):
            if not (t0 <= t <= t1):
                continue
            ts = t + np.linspace(-0.5, 0.5, sub) * scene.exposure_s
            ts = np.clip(ts, t0, t1)
            X = pos_fn(ts)
            uv = cam.project(X)
            depth = cam.depth(X)
            ok = np.all(np.isfinite(uv), axis=1) & (depth > 0.2)
            r = cam.focal_px * scene.ball_radius_m / np.where(depth > 0, depth, np.nan)
            _draw_ball(img, uv[ok], r[ok], scene.ball_grey)
            Xc = pos_fn(np.array([t]))[0]
            uvc = cam.project(Xc[None])[0]
            dc = float(cam.depth(Xc[None])[0])
            if np.all(np.isfinite(uvc)) and -5 <= uvc[0] <= w + 5 and -5 <= uvc[1] <= h + 5 and dc > 0:
                truth.append({"t": t, "flight": fi + 1, "u": float(uvc[0]), "v": float(uvc[1]),
                              "radius_px": float(cam.focal_px * scene.ball_radius_m / dc),
                              "x": float(Xc[0]), "y": float(Xc[1]), "z": float(Xc[2])})
        noise = bank[k % len(bank)]
        img += np.roll(noise, int(rng.integers(0, h)), axis=0)
        writer.write(np.clip(img, 0, 255).astype(np.uint8))
        if progress:
            progress(k + 1, n)
    writer.release()
    return truth
