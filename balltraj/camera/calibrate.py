"""Calibration: the lens from checkerboard views, the scene (camera pose) from landmarks.

Uses OpenCV (findChessboardCorners + cornerSubPix, calibrateCamera, solvePnP + solvePnPRefineLM);
see docs/opencv-notes.md for the measured behaviour these choices rest on (tilted views needed;
EPnP avoided with four coplanar points).
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import cv2
import numpy as np

from ..errors import InputError
from .model import Camera, rotation_vector

# ------------------------------------------------------------------------------ field templates
# World frames in words and the points each template defines, from each game's rules.
YD, FT, IN = 0.9144, 0.3048, 0.0254
TEMPLATES: dict[str, dict] = {
    "baseball-pitch": {
        "rule": "Official Baseball Rules: pitcher's plate front edge to the rear point of home plate 60 ft 6 in "
                "(18.44 m); home plate 17 in wide, 8.5 in sides, 12 in back edges; pitcher's plate 24 x 6 in",
        "frame": "origin on the ground at the middle of the front edge of the pitcher's plate; x toward the rear "
                 "point of home plate; y to the left looking along x; z up",
        "points": {
            "rubber-left": (0.0, 12 * IN, 0.0), "rubber-right": (0.0, -12 * IN, 0.0),
            "plate-rear": (18.44, 0.0, 0.0),
            "plate-front-left": (18.44 - 17 * IN, 8.5 * IN, 0.0),
            "plate-front-right": (18.44 - 17 * IN, -8.5 * IN, 0.0),
            "plate-side-left": (18.44 - math.sqrt(12**2 - 8.5**2) * IN, 8.5 * IN, 0.0),
            "plate-side-right": (18.44 - math.sqrt(12**2 - 8.5**2) * IN, -8.5 * IN, 0.0),
        },
    },
    "soccer-goal": {
        "rule": "IFAB Laws of the Game, Law 1: 7.32 m between the inner edges of the posts, lower edge of the "
                "crossbar 2.44 m above the ground; goal area 5.5 m, penalty area 16.5 m, penalty mark 11 m",
        "frame": "origin on the goal line midway between the posts; x into the goal (toward the target: the field "
                 "lies at negative x, the penalty mark at x = -11 m); y to the left looking along x, i.e. left as "
                 "a kicker facing the goal sees it; z up. (Files calibrated with the earlier frame, x out of the "
                 "goal, convert by x -> -x, y -> -y; the left/right landmark names then swap.)",
        "points": {
            "post-left-foot": (0.0, 3.66, 0.0), "post-right-foot": (0.0, -3.66, 0.0),
            "post-left-top": (0.0, 3.66, 2.44), "post-right-top": (0.0, -3.66, 2.44),
            "goal-area-left": (-5.5, 3.66 + 5.5, 0.0), "goal-area-right": (-5.5, -3.66 - 5.5, 0.0),
            "penalty-area-left": (-16.5, 3.66 + 16.5, 0.0), "penalty-area-right": (-16.5, -3.66 - 16.5, 0.0),
            "penalty-mark": (-11.0, 0.0, 0.0),
        },
    },
    "tennis-court": {
        "rule": "ITF Rules of Tennis, Rules 1-2: court 23.77 m long, singles 8.23 m and doubles 10.97 m wide, "
                "service lines 6.40 m from the net",
        "frame": "origin at the centre mark of the near baseline; x along the court toward the far baseline; "
                 "y to the left looking along x; z up",
        "points": {
            "near-baseline-singles-left": (0.0, 4.115, 0.0), "near-baseline-singles-right": (0.0, -4.115, 0.0),
            "near-baseline-doubles-left": (0.0, 5.485, 0.0), "near-baseline-doubles-right": (0.0, -5.485, 0.0),
            "near-service-centre": (23.77 / 2 - 6.40, 0.0, 0.0),
            "near-service-left": (23.77 / 2 - 6.40, 4.115, 0.0), "near-service-right": (23.77 / 2 - 6.40, -4.115, 0.0),
            "far-service-centre": (23.77 / 2 + 6.40, 0.0, 0.0),
            "far-baseline-singles-left": (23.77, 4.115, 0.0), "far-baseline-singles-right": (23.77, -4.115, 0.0),
        },
    },
    "cricket-pitch": {
        "rule": "MCC Laws of Cricket, Law 6.1: the pitch is 22 yd (20.12 m) between the bowling creases and "
                "10 ft (3.05 m) wide",
        "frame": "origin at the middle of the bowler's-end bowling crease; x toward the batter's end; y to the "
                 "left looking along x; z up",
        "points": {
            "bowler-crease-left": (0.0, 1.525, 0.0), "bowler-crease-right": (0.0, -1.525, 0.0),
            "batter-crease-left": (20.12, 1.525, 0.0), "batter-crease-right": (20.12, -1.525, 0.0),
            "bowler-stumps-middle": (0.0, 0.0, 0.0), "batter-stumps-middle": (20.12, 0.0, 0.0),
        },
    },
    "basketball-hoop": {
        "rule": "FIBA Official Basketball Rules, court and equipment (from memory): free-throw line 3.60 m long, "
                "its far edge 5.80 m from the inner edge of the end line; restricted area 4.90 m wide; backboard "
                "1.80 x 1.05 m, lower edge 2.90 m above the floor, front face 1.20 m inside the end line; ring "
                "3.05 m high, 0.45 m inside diameter, its inner edge 0.15 m from the backboard",
        "frame": "origin on the floor at the middle of the free-throw line; x toward the basket (the end line at "
                 "x = 5.80 m); y to the left looking along x; z up",
        "points": {
            "free-throw-left": (0.0, 1.80, 0.0), "free-throw-right": (0.0, -1.80, 0.0),
            "key-end-left": (5.80, 2.45, 0.0), "key-end-right": (5.80, -2.45, 0.0),
            "board-bottom-left": (4.60, 0.90, 2.90), "board-bottom-right": (4.60, -0.90, 2.90),
            "board-top-left": (4.60, 0.90, 3.95), "board-top-right": (4.60, -0.90, 3.95),
            "ring-front": (4.60 - 0.15 - 0.45, 0.0, 3.05),
        },
    },
    "volleyball-court": {
        "rule": "FIVB Official Volleyball Rules, Rule 1 (from memory): court 18 x 9 m, centre line under the net, "
                "attack lines 3 m from the centre line",
        "frame": "origin at the middle of the near end line (the server's end); x toward the far end line; y to "
                 "the left looking along x; z up",
        "points": {
            "near-end-left": (0.0, 4.5, 0.0), "near-end-right": (0.0, -4.5, 0.0),
            "near-attack-left": (6.0, 4.5, 0.0), "near-attack-right": (6.0, -4.5, 0.0),
            "centre-left": (9.0, 4.5, 0.0), "centre-right": (9.0, -4.5, 0.0),
            "far-attack-left": (12.0, 4.5, 0.0), "far-attack-right": (12.0, -4.5, 0.0),
            "far-end-left": (18.0, 4.5, 0.0), "far-end-right": (18.0, -4.5, 0.0),
        },
    },
}

# Where flights start and where they go, per template (world frame of the template). A zone is a
# soft prior on the point where the flight passes the plane x = centre[0]: centre [m], one-sigma [m],
# and whether the ball starts on the ground (then z = the ball's radius). Typical values (from
# memory): a pitcher releases about 1.5-2 m in front of the rubber at 1.5-2 m height; a bowler
# releases near the popping crease (4 ft = 1.22 m in front of the bowling crease, Law 7) at about
# 2 m; a server hits about 2.5-3 m up just behind the baseline.
LAUNCH_ZONES: dict[str, dict[str, tuple[tuple[float, float, float], float, bool]]] = {
    "baseball-pitch": {"release": ((1.7, 0.0, 1.75), 0.45, False),
                       "rubber": ((0.0, 0.0, 0.0), 0.35, True)},
    "soccer-goal": {"penalty-mark": ((-11.0, 0.0, 0.0), 0.10, True),
                    "free-kick-arc": ((-20.0, 0.0, 0.0), 4.0, True)},
    "tennis-court": {"serve": ((-0.1, 0.0, 2.7), 0.6, False),
                     "baseline-rally": ((-1.0, 0.0, 1.0), 1.5, False)},
    "cricket-pitch": {"release": ((1.22, 0.0, 2.1), 0.5, False)},
    "basketball-hoop": {"free-throw": ((0.3, 0.0, 2.2), 0.4, False)},
    "volleyball-court": {"serve": ((-1.0, 0.0, 2.8), 1.0, False)},
}
# the point each template's flights head for (x grows toward it)
TARGETS: dict[str, tuple[float, float, float]] = {
    "baseball-pitch": (18.44, 0.0, 0.0), "soccer-goal": (0.0, 0.0, 1.22),
    "tennis-court": (23.77, 0.0, 0.0), "cricket-pitch": (20.12, 0.0, 0.0),
    "basketball-hoop": (4.60 - 0.15 - 0.225, 0.0, 3.05), "volleyball-court": (18.0, 0.0, 0.0),
}


def launch_zone(template: str, zone: str | None = None, ball_radius_m: float | None = None):
    """A template's launch zone as a soft prior.

    Parameters
    ----------
    template : str
        Template name (:data:`TEMPLATES`).
    zone : str, optional
        Zone name (:data:`LAUNCH_ZONES`); None: the template's first zone.
    ball_radius_m : float, optional
        Radius of the ball [m]; a ball starting on the ground has its centre at this height.

    Returns
    -------
    centre : ndarray, shape (3,) [m]
    sigma_m : float [m]
    label : str
    """
    template_points(template)
    zones = LAUNCH_ZONES[template]
    name = zone if zone is not None else next(iter(zones))
    if name not in zones:
        raise InputError(f"template {template!r} has no launch zone {name!r}", hint=f"choose one of: {', '.join(zones)}")
    c, sig, on_ground = zones[name]
    centre = np.array(c, float)
    if on_ground and ball_radius_m is not None:
        centre[2] = float(ball_radius_m)
    return centre, float(sig), f"{template} {name}"


def template_points(name: str) -> dict:
    if name not in TEMPLATES:
        raise InputError(f"unknown landmark template {name!r}", hint=f"choose one of: {', '.join(TEMPLATES)}")
    return TEMPLATES[name]


# ------------------------------------------------------------------------------ board
def board_object_points(cols: int, rows: int, square_m: float) -> np.ndarray:
    """Inner-corner positions (cols*rows, 3) of a checkerboard on z = 0, in OpenCV's order."""
    g = np.zeros((rows * cols, 3), np.float32)
    g[:, :2] = np.mgrid[0:cols, 0:rows].T.reshape(-1, 2) * square_m
    return g


def render_board_view(camera: Camera, board_R, board_t, cols: int, rows: int, square_m: float,
                      noise: float = 2.0, blur: float = 0.8, rng=None) -> np.ndarray:
    """Grey image of a checkerboard (cols x rows inner corners) seen by ``camera``, rendered by
    inverse-mapping each pixel through the distortion model (for tests and the demo)."""
    w, h = camera.image_size
    uu, vv = np.meshgrid(np.arange(w) + 0.0, np.arange(h) + 0.0)
    origin, d = camera.rays(np.stack([uu, vv], axis=-1))
    # board plane: X = board_R @ [a, b, 0] + board_t in world
    n = board_R[:, 2]
    denom = d @ n
    s = ((board_t - origin) @ n) / np.where(np.abs(denom) > 1e-12, denom, np.nan)
    P = origin + d * s[..., None]
    ab = (P - board_t) @ board_R  # board coordinates
    a, b = ab[..., 0] / square_m + 1, ab[..., 1] / square_m + 1  # squares start one before corner 0
    inside = (a >= 0) & (a < cols + 1) & (b >= 0) & (b < rows + 1) & (s > 0)
    check = (np.floor(a).astype(int) + np.floor(b).astype(int)) % 2 == 0
    img = np.full((h, w), 200.0)
    img[inside] = np.where(check[inside], 30.0, 225.0)
    # white border around the board
    border = (a >= -0.6) & (a < cols + 1.6) & (b >= -0.6) & (b < rows + 1.6) & ~inside & (s > 0)
    img[border] = 235.0
    if blur:
        img = cv2.GaussianBlur(img, (0, 0), blur)
    rng = rng or np.random.default_rng(0)
    img = img + rng.normal(0, noise, img.shape)
    return np.clip(img, 0, 255).astype(np.uint8)


@dataclass(frozen=True)
class LensCalibration:
    camera: Camera
    rms_px: float
    per_view_px: list[float]
    used: list[str]
    rejected: dict[str, str]
    coverage: float
    warnings: list[str]


def _sharpness(gray, corners) -> float:
    x, y, w, h = cv2.boundingRect(corners.astype(np.float32))
    roi = gray[max(0, y):y + h, max(0, x):x + w]
    return float(cv2.Laplacian(roi, cv2.CV_64F).var()) if roi.size else 0.0


def detect_board(gray, cols: int, rows: int):
    flags = cv2.CALIB_CB_ADAPTIVE_THRESH + cv2.CALIB_CB_NORMALIZE_IMAGE
    ok, corners = cv2.findChessboardCorners(gray, (cols, rows), flags)
    if not ok:
        return None
    crit = (cv2.TERM_CRITERIA_EPS + cv2.TERM_CRITERIA_MAX_ITER, 50, 1e-4)
    corners = cv2.cornerSubPix(gray, corners, (7, 7), (-1, -1), crit)
    return corners.reshape(-1, 2)


def calibrate_lens(views: list[tuple[str, np.ndarray]], cols: int, rows: int, square_m: float, name: str = "camera",
                   min_sharpness: float = 20.0, duplicate_px: float | None = None) -> LensCalibration:
    """Intrinsics and distortion from grey images of a checkerboard (``views`` = (label, image))."""
    if not views:
        raise InputError("no images to calibrate from")
    size = views[0][1].shape[::-1]
    obj = board_object_points(cols, rows, square_m)
    used, img_pts, rejected, accepted = [], [], {}, []
    diag = math.hypot(*size)
    dup = duplicate_px if duplicate_px is not None else 0.01 * diag
    for label, gray in views:
        if gray.shape[::-1] != size:
            rejected[label] = f"image size {gray.shape[1]}x{gray.shape[0]} differs from the first ({size[0]}x{size[1]})"
            continue
        c = detect_board(gray, cols, rows)
        if c is None:
            rejected[label] = "no board found"
            continue
        sharp = _sharpness(gray, c)
        if sharp < min_sharpness:
            rejected[label] = f"too blurred (sharpness {sharp:.0f} < {min_sharpness:.0f})"
            continue
        if any(np.mean(np.linalg.norm(c - a, axis=1)) < dup for a in accepted):
            rejected[label] = "near-duplicate of an accepted view"
            continue
        accepted.append(c)
        used.append(label)
        img_pts.append(c.astype(np.float32))
    if not img_pts:
        raise InputError(f"no board of {cols}x{rows} inner corners was found in any of the {len(views)} views",
                         hint="check the board size (inner corners, not squares), focus and lighting", about="board_size")
    if len(img_pts) < 3:
        raise InputError(f"only {len(img_pts)} usable board view(s); at least 3 tilted views are needed",
                         hint="film the board at several strong tilts, filling different parts of the frame")
    rms, K, dist, rvecs, tvecs = cv2.calibrateCamera([obj] * len(img_pts), img_pts, size, None, None)
    per_view = []
    for o_r, o_t, pts in zip(rvecs, tvecs, img_pts):
        proj, _ = cv2.projectPoints(obj, o_r, o_t, K, dist)
        per_view.append(float(np.sqrt(np.mean(np.sum((proj.reshape(-1, 2) - pts) ** 2, axis=1)))))
    allpts = np.concatenate(img_pts)
    hull = cv2.convexHull(allpts.astype(np.float32))
    coverage = float(cv2.contourArea(hull) / (size[0] * size[1]))
    warnings = []
    if coverage < 0.5:
        warnings.append(f"the board views cover only {100 * coverage:.0f}% of the frame; add views near the edges "
                        "and corners so the lens distortion is measured where the ball will be")
    if len(img_pts) < 8:
        warnings.append(f"{len(img_pts)} views used; 10-20 strongly tilted views give a steadier focal length")
    cam = Camera(name, (int(size[0]), int(size[1])), K, np.asarray(dist).reshape(-1)[:5], np.zeros(3), np.zeros(3))
    return LensCalibration(cam, float(rms), per_view, used, rejected, coverage, warnings)


def board_figure(cols: int, rows: int, square_mm: float, margin_mm: float = 10.0):
    """A matplotlib figure of the printable board at its true size (squares = inner corners + 1), on
    a page that fits both A4 (210 x 297 mm) and US Letter (215.9 x 279.4 mm) at 100 %: 210 x 279.4 mm,
    the board turned to portrait when that fits better, ``margin_mm`` clear of every edge for the
    printer. Raises InputError when the board does not fit at this square size."""
    import matplotlib

    matplotlib.use("Agg")
    import matplotlib.pyplot as plt

    page_w, page_h = 210.0, 279.4  # mm: the narrower of A4 and Letter, the shorter of the two
    nx, ny = cols + 1, rows + 1
    text_mm = 6.0
    room_w, room_h = page_w - 2 * margin_mm, page_h - 2 * margin_mm - text_mm
    fits = [(a, b) for a, b in ((nx, ny), (ny, nx)) if a * square_mm <= room_w and b * square_mm <= room_h]
    if not fits:
        best = max(min(room_w / a, room_h / b) for a, b in ((nx, ny), (ny, nx)))
        raise InputError(f"a {cols} x {rows} board with {square_mm:g} mm squares does not fit on A4 or Letter",
                         hint=f"use squares of {math.floor(best):g} mm or less, or fewer corners", about="square_mm")
    ax_n, ay_n = fits[0]
    fig = plt.figure(figsize=(page_w / 25.4, page_h / 25.4))
    ax = fig.add_axes([0, 0, 1, 1])
    ax.set_xlim(0, page_w)
    ax.set_ylim(0, page_h)
    ax.axis("off")
    x0 = (page_w - ax_n * square_mm) / 2
    y0 = margin_mm + text_mm + (room_h - ay_n * square_mm) / 2
    for i in range(ax_n):
        for j in range(ay_n):
            if (i + j) % 2 == 0:
                ax.add_patch(plt.Rectangle((x0 + i * square_mm, y0 + j * square_mm), square_mm, square_mm,
                                           color="black", lw=0))
    ax.text(margin_mm, margin_mm, f"balltraj calibration board: {cols} x {rows} inner corners, squares "
            f"{square_mm:g} mm. Print at 100 % (A4 or Letter) and check one square with a ruler.", fontsize=7)
    return fig


# ------------------------------------------------------------------------------ scene
@dataclass(frozen=True)
class SceneCalibration:
    camera: Camera
    errors_px: dict[str, float]
    rms_px: float
    frame: str
    focal_estimated: bool


def _check_landmarks(world, names):
    if len(world) < 4:
        raise InputError(f"{len(world)} landmarks are too few; at least 4 are needed (5-8 well spread is better)")
    c = world - world.mean(axis=0)
    sv = np.linalg.svd(c, compute_uv=False)
    if sv[1] < 1e-3 * max(sv[0], 1e-12):
        raise InputError("the landmarks lie on one line, which cannot fix the camera's pose",
                         hint="add landmarks off that line (e.g. both posts and a corner of the area)")


def calibrate_scene(world, pixels, names, lens: Camera | None, image_size, name: str = "camera",
                    frame: str = "as given by the landmark coordinates") -> SceneCalibration:
    """Camera pose (and, without a lens file, the focal length) from landmark correspondences."""
    world = np.asarray(world, np.float64)
    pix = np.asarray(pixels, np.float64)
    _check_landmarks(world, names)
    w, h = image_size
    focal_estimated = lens is None
    if lens is not None:
        if tuple(lens.image_size) != tuple(image_size):
            raise InputError(f"the lens calibration is for {lens.image_size[0]}x{lens.image_size[1]} images, "
                             f"the landmarks for {w}x{h}", hint="calibrate the lens at the same resolution")
        K, dist = lens.K.copy(), lens.dist.copy()
    else:
        K = np.array([[1.2 * max(w, h), 0, w / 2], [0, 1.2 * max(w, h), h / 2], [0, 0, 1.0]])
        dist = np.zeros(5)
        planar = np.linalg.svd(world - world.mean(0), compute_uv=False)[2] < 1e-6
        if planar and len(world) >= 4:
            # rotate the plane to z = 0 for calibrateCamera, which wants planar object points there
            c = world.mean(0)
            _, _, vt = np.linalg.svd(world - c)
            local = (world - c) @ vt.T
            local[:, 2] = 0
            flags = (cv2.CALIB_USE_INTRINSIC_GUESS | cv2.CALIB_FIX_PRINCIPAL_POINT | cv2.CALIB_FIX_ASPECT_RATIO
                     | cv2.CALIB_ZERO_TANGENT_DIST | cv2.CALIB_FIX_K1 | cv2.CALIB_FIX_K2 | cv2.CALIB_FIX_K3)
            _, K, _, _, _ = cv2.calibrateCamera([local.astype(np.float32)], [pix.astype(np.float32)], (w, h), K,
                                                dist, flags=flags)
        elif len(world) >= 6:
            # non-planar: DLT projection matrix gives K
            A = []
            for (X, Y, Z), (u, v) in zip(world, pix):
                A.append([X, Y, Z, 1, 0, 0, 0, 0, -u * X, -u * Y, -u * Z, -u])
                A.append([0, 0, 0, 0, X, Y, Z, 1, -v * X, -v * Y, -v * Z, -v])
            P = np.linalg.svd(np.asarray(A))[2][-1].reshape(3, 4)
            Kd = cv2.decomposeProjectionMatrix(P)[0]
            Kd = Kd / Kd[2, 2]
            f = 0.5 * (abs(Kd[0, 0]) + abs(Kd[1, 1]))
            if np.isfinite(f) and f > 0:
                K[0, 0] = K[1, 1] = f
        else:
            raise InputError("without a lens file the focal length is estimated from the landmarks: give at least "
                             "4 coplanar or 6 non-coplanar landmarks", hint="or give a lens file from the lens calibration", about="lens")
    ok, rvec, tvec = _solve_pnp(world, pix, K, dist)
    if not ok:
        raise InputError("the camera pose could not be found from these landmarks",
                         hint="check that each pixel matches its landmark name")
    rvec, tvec = cv2.solvePnPRefineLM(world, pix, K, dist, rvec, tvec)
    cam = Camera(name, (int(w), int(h)), K, dist, rvec.reshape(3), tvec.reshape(3))
    proj = cam.project(world)
    err = np.linalg.norm(proj - pix, axis=1)
    if cam.depth(world).min() <= 0:
        raise InputError("the fitted camera has landmarks behind it", hint="check the landmark order and pixels")
    return SceneCalibration(cam, dict(zip(names, map(float, err))), float(np.sqrt(np.mean(err**2))), frame,
                            focal_estimated)


def _solve_pnp(world, pix, K, dist):
    """First finite pose from ITERATIVE, then SQPnP (docs/opencv-notes.md: no EPnP with 4 coplanar points)."""
    for method in (cv2.SOLVEPNP_ITERATIVE, cv2.SOLVEPNP_SQPNP):
        try:
            ok, rvec, tvec = cv2.solvePnP(world, pix, K, dist, flags=method)
        except cv2.error:
            continue
        if ok and np.all(np.isfinite(rvec)) and np.all(np.isfinite(tvec)):
            return True, rvec, tvec
    return False, None, None


def describe_pose(cam: Camera) -> str:
    c = cam.centre
    fwd = cam.R[2]
    az = math.degrees(math.atan2(fwd[1], fwd[0]))
    el = math.degrees(math.asin(max(-1, min(1, fwd[2]))))
    return (f"camera at x = {c[0]:.2f} m, y = {c[1]:.2f} m, height {c[2]:.2f} m, looking {az:+.0f} deg from +x "
            f"(toward +y is positive) and {el:+.0f} deg above the horizontal; focal length {cam.focal_px:.0f} px")


__all__ = ["TEMPLATES", "LAUNCH_ZONES", "TARGETS", "launch_zone", "board_object_points", "render_board_view", "calibrate_lens", "calibrate_scene",
           "describe_pose", "board_figure", "rotation_vector"]
