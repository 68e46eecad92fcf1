"""Truth for the surface-spin estimator: textured, shaded, spinning balls with motion blur (seeded).

Written independently of ``balltraj.vision.surface_spin`` (it shares no code with it): a ray-cast
sphere per pixel with spatial super-sampling, a texture on the ball's body (a baseball-like seam
curve with stitches and two stamps, painted dots, or nothing), Lambertian shading from a light
direction plus ambient light, the ball rotated by ``exp(omega t)`` and moved across the image, every
frame the average of sub-frame renders over the exposure, Gaussian sensor noise, 8-bit quantisation
and optionally an H.264 round trip through PyAV.

Geometry: orthographic view of the ball (a ball far from the camera), camera frame x right, y down,
z into the scene; the visible hemisphere has normals with z < 0. Spin and rotations are in this
camera frame (rad/s, right-hand rule). Pixel (i, j) is centred at (x=j, y=i).

The seam is the classic two-lobe curve x = a cos t + b cos 3t, y = a sin t - b sin 3t,
z = 2 sqrt(ab) sin 2t with a + b = 1, which lies on the unit sphere (from memory).
"""
from __future__ import annotations

import io
import math
from dataclasses import dataclass

import numpy as np
from scipy.spatial import cKDTree
from scipy.spatial.transform import Rotation


@dataclass
class SpinScene:
    radius_px: float = 14.0
    image_size: tuple[int, int] = (96, 64)  # (width, height) [px]
    fps: float = 240.0
    n_frames: int = 10
    exposure_s: float = 1 / 2000
    spin: tuple[float, float, float] = (0.0, -200.0, 0.0)  # camera frame [rad/s]
    start_px: tuple[float, float] | None = None  # ball centre at t = 0 [px]; default: left, mid-height
    velocity_pxps: tuple[float, float] | None = None  # [px/s]; default: crosses the frame in the clip
    light: tuple[float, float, float] = (-0.55, -0.6, -0.58)  # towards the light, camera frame
    ambient: float = 0.3
    gain: float = 235.0  # grey level of a white, fully lit surface
    background: float = 55.0
    texture: str = "seams"  # "seams", "dots" or "plain"
    noise: float = 2.0  # grey levels (one sigma)
    subframes: int = 8
    supersample: int = 3
    h264_crf: int | None = None  # None: no compression
    seed: int = 0


def _seam_points(n=3000, b=0.3):
    t = np.linspace(0, 2 * math.pi, n, endpoint=False)
    a = 1 - b
    p = np.stack([a * np.cos(t) + b * np.cos(3 * t), a * np.sin(t) - b * np.sin(3 * t),
                  2 * math.sqrt(a * b) * np.sin(2 * t)], axis=1)
    return t, p / np.linalg.norm(p, axis=1, keepdims=True)


class _Texture:
    def __init__(self, kind, rng):
        self.kind = kind
        if kind == "seams":
            self.t, pts = _seam_points()
            self.tree = cKDTree(pts)
            stamps = np.array([[0.62, 0.35, -0.7], [-0.3, 0.9, 0.3]])
            self.stamps = stamps / np.linalg.norm(stamps, axis=1, keepdims=True)
        elif kind == "dots":
            d = rng.normal(size=(40, 3))
            self.dots = d / np.linalg.norm(d, axis=1, keepdims=True)
            self.dot_tree = cKDTree(self.dots)
        elif kind != "plain":
            raise ValueError(f"unknown texture {kind!r}")

    def albedo(self, p):
        """Albedo (0..1) at body-frame unit vectors ``p`` (..., 3)."""
        shp = p.shape[:-1]
        q = p.reshape(-1, 3)
        alb = np.full(len(q), 0.92)
        if self.kind == "seams":
            d, i = self.tree.query(q)
            stitch = 0.5 + 0.5 * np.cos(self.t[i] * 108)  # stitches along the seam
            width = 0.045 + 0.035 * stitch
            alb = np.where(d < width, 0.92 - 0.62 * np.clip((width - d) / 0.02, 0, 1), alb)
            for s, size in zip(self.stamps, (0.16, 0.11)):
                ds = np.linalg.norm(q - s, axis=1)
                alb = np.where(ds < size, np.minimum(alb, 0.45), alb)
        elif self.kind == "dots":
            d, _ = self.dot_tree.query(q)
            alb = np.where(d < 0.13, 0.92 - 0.7 * np.clip((0.13 - d) / 0.02, 0, 1), alb)
        return alb.reshape(shp)


def _h264_round_trip(frames, crf, fps):
    import av  # test-only dependency
    h, w = frames.shape[1:]
    buf = io.BytesIO()
    with av.open(buf, "w", format="mp4") as out:
        st = out.add_stream("libx264", rate=int(round(fps)))
        st.width, st.height, st.pix_fmt = w, h, "yuv420p"
        st.options = {"crf": str(crf), "preset": "medium"}
        for f in frames:
            vf = av.VideoFrame.from_ndarray(np.ascontiguousarray(f), format="gray").reformat(format="yuv420p")
            for pkt in st.encode(vf):
                out.mux(pkt)
        for pkt in st.encode():
            out.mux(pkt)
    buf.seek(0)
    dec = []
    with av.open(buf, "r") as inp:
        for fr in inp.decode(video=0):
            dec.append(fr.to_ndarray(format="gray"))
    return np.stack(dec)


def render_spin_clip(scene: SpinScene):
    """Render the clip: (frames uint8 (N, H, W), truth dict with t, centres (N, 2) px at mid-exposure,
    radius_px, spin (3,) rad/s and the body-to-camera rotations (N, 3, 3) at the frame times)."""
    rng = np.random.default_rng(scene.seed)
    tex = _Texture(scene.texture, rng)
    w, h = scene.image_size
    n, r = scene.n_frames, scene.radius_px
    dur = n / scene.fps
    start = np.array(scene.start_px if scene.start_px is not None else (2.2 * r, h / 2))
    vel = np.array(scene.velocity_pxps if scene.velocity_pxps is not None
                   else ((w - 4.4 * r) / dur, 0.15 * h / dur))
    omega = np.asarray(scene.spin, float)
    R0 = Rotation.random(random_state=rng.integers(2**31)).as_matrix()
    L = np.asarray(scene.light, float)
    L = L / np.linalg.norm(L)
    ss = scene.supersample
    offs = (np.arange(ss) + 0.5) / ss - 0.5
    ys, xs = np.mgrid[0:h, 0:w].astype(float)
    frames, centres, rots = [], [], []
    for k in range(n):
        tk = k / scene.fps
        acc = np.zeros((h, w))
        taus = tk + scene.exposure_s * ((np.arange(scene.subframes) + 0.5) / scene.subframes - 0.5)
        for tau in taus:
            c = start + vel * tau
            R = Rotation.from_rotvec(omega * tau).as_matrix() @ R0
            x0, x1 = int(max(0, math.floor(c[0] - r - 2))), int(min(w, math.ceil(c[0] + r + 3)))
            y0, y1 = int(max(0, math.floor(c[1] - r - 2))), int(min(h, math.ceil(c[1] + r + 3)))
            img = np.full((h, w), scene.background) + 8.0 * (xs / w - 0.5)
            if x1 > x0 and y1 > y0:
                gx = xs[y0:y1, x0:x1][..., None, None] + offs[None, :]  # (hh, ww, 1, ss)
                gy = ys[y0:y1, x0:x1][..., None, None] + offs[:, None]  # (hh, ww, ss, 1)
                gx, gy = np.broadcast_arrays(gx, gy)
                xn, yn = (gx - c[0]) / r, (gy - c[1]) / r
                rho2 = xn * xn + yn * yn
                inside = rho2 < 1
                nz = -np.sqrt(np.clip(1 - rho2, 0, None))
                nrm = np.stack([xn, yn, nz], axis=-1)
                body = nrm @ R  # R^T n for row vectors
                alb = tex.albedo(body)
                shade = scene.ambient + (1 - scene.ambient) * np.clip(nrm @ L, 0, None)
                bgv = scene.background + 8.0 * (gx / w - 0.5)
                val = np.where(inside, scene.gain * alb * shade, bgv)
                img[y0:y1, x0:x1] = val.mean(axis=(2, 3))
            acc += img
        frames.append(acc / len(taus))
        centres.append(start + vel * tk)
        rots.append(Rotation.from_rotvec(omega * tk).as_matrix() @ R0)
    f = np.stack(frames) + rng.normal(0, scene.noise, (n, h, w))
    f = np.clip(np.round(f), 0, 255).astype(np.uint8)
    if scene.h264_crf is not None:
        f = _h264_round_trip(f, scene.h264_crf, scene.fps)
    truth = {"t": np.arange(n) / scene.fps, "centres": np.array(centres), "radius_px": r,
             "spin": omega, "rotations": np.array(rots), "velocity_pxps": vel}
    return f, truth
