"""The workbench's web app (Starlette): pages, frames, calibration by clicks, the start point,
analyses with progress, review and re-fit, the report and the library's history.

Every file it opens is resolved strictly under the folder (:func:`balltraj.workbench.files.inside`);
request bodies are small JSON (bounded); user text reaches pages through Jinja2 autoescaping or
the report's own escaping; nothing from a request is ever run as code.
"""

from __future__ import annotations

import json
import math
from pathlib import Path

import jinja2
from starlette.applications import Starlette
from starlette.concurrency import run_in_threadpool
from starlette.middleware import Middleware
from starlette.middleware.trustedhost import TrustedHostMiddleware
from starlette.requests import Request
from starlette.responses import HTMLResponse, JSONResponse, Response
from starlette.routing import Mount, Route
from starlette.staticfiles import StaticFiles

from .. import __version__, pipeline
from ..camera.calibrate import TEMPLATES
from ..errors import BallTrajError, InputError
from ..formats import read_cameras, read_json, write_json
from ..physics.air import air_conditions
from ..physics.balls import ball_names, get_ball
from ..report.html import build_report
from . import history
from .files import FrameStore, OutsideFolder, camera_path, inside, list_clips
from .geometry import TOWARD_ORIGIN, calibrate_clicks, ground_point, template_pixels
from .jobs import Jobs, refit, save_to_library

HERE = Path(__file__).parent
MAX_BODY_BYTES = 64 * 1024
MAX_LABEL_CHARS = 200
LIBRARY_NAME = "balltraj-library.sqlite"
PAGE_CSP = ("default-src 'self'; img-src 'self' data: blob:; style-src 'self'; script-src 'self'; "
            "frame-src 'self'; connect-src 'self'; object-src 'none'; base-uri 'none'; form-action 'self'; "
            "frame-ancestors 'none'")
REPORT_CSP = "default-src 'none'; style-src 'unsafe-inline'; img-src data:; frame-ancestors 'self'; sandbox"


class TooLarge(InputError):
    pass


class SafeHeaders:
    """ASGI middleware: every response says not to sniff types or send referrers (pages say where they may
    be framed in their Content-Security-Policy: frame-ancestors)."""

    EXTRA = [(b"x-content-type-options", b"nosniff"), (b"referrer-policy", b"no-referrer"),
             ]

    def __init__(self, app):
        self.app = app

    async def __call__(self, scope, receive, send):
        if scope["type"] != "http":
            return await self.app(scope, receive, send)

        async def send_with_headers(message):
            if message["type"] == "http.response.start":
                message = {**message, "headers": list(message.get("headers", [])) + self.EXTRA}
            await send(message)

        await self.app(scope, receive, send_with_headers)


def _env() -> jinja2.Environment:
    return jinja2.Environment(loader=jinja2.FileSystemLoader(str(HERE / "templates")), autoescape=True,
                              undefined=jinja2.StrictUndefined)


def create_app(folder, *, library: Path | None = None, allowed_hosts=("127.0.0.1", "localhost")) -> Starlette:
    """The workbench for the clips, camera files and library in ``folder``."""
    root = Path(folder).resolve()
    if not root.is_dir():
        raise InputError("the workbench needs a folder of clips", path=str(folder))
    lib_path = Path(library) if library is not None else root / LIBRARY_NAME
    env, frames, jobs = _env(), FrameStore(), Jobs()

    def page(name: str, status: int = 200, **ctx) -> HTMLResponse:
        html = env.get_template(name).render(version=__version__, folder=root.name, **ctx)
        return HTMLResponse(html, status, headers={"Content-Security-Policy": PAGE_CSP})

    def error_page(message: str, status: int) -> HTMLResponse:
        return page("error.html", status, message=message)

    def clip_of(request: Request) -> tuple[Path, str]:
        rel = request.query_params.get("path", "")
        p = inside(root, rel)
        if not p.is_file():
            raise OutsideFolder("no such clip in this folder")
        return p, rel

    async def body(request: Request) -> dict:
        if request.headers.get("content-type", "").split(";")[0].strip() != "application/json":
            raise InputError("send JSON (Content-Type: application/json)")
        n = request.headers.get("content-length")
        if n is not None and (not n.isdigit() or int(n) > MAX_BODY_BYTES):
            raise TooLarge(f"the request is larger than {MAX_BODY_BYTES // 1024} kB")
        data = b""
        async for chunk in request.stream():
            data += chunk
            if len(data) > MAX_BODY_BYTES:
                raise TooLarge(f"the request is larger than {MAX_BODY_BYTES // 1024} kB")
        try:
            obj = json.loads(data.decode("utf-8"), parse_constant=_reject)
        except (ValueError, UnicodeDecodeError):
            raise InputError("the request is not valid JSON") from None
        if not isinstance(obj, dict):
            raise InputError("the request must be a JSON object")
        return obj

    def api(fn):
        async def run(request: Request):
            try:
                return await fn(request)
            except OutsideFolder as e:
                return JSONResponse({"error": e.problem}, 404)
            except TooLarge as e:
                return JSONResponse({"error": e.problem}, 413)
            except BallTrajError as e:
                return JSONResponse({"error": e.one_line()}, 400)
            except Exception as e:  # noqa: BLE001 - a bug: say so on the page, keep serving
                return JSONResponse({"error": f"internal error ({type(e).__name__}); this is a bug in balltraj"}, 500)
        return run

    async def index(request: Request):
        clips = [(c, camera_path(inside(root, c)).is_file()) for c in list_clips(root)]
        return page("index.html", clips=clips, has_library=lib_path.is_file())

    async def clip_page(request: Request):
        try:
            p, rel = clip_of(request)
            info = await run_in_threadpool(frames.info, p)
        except OutsideFolder as e:
            return error_page(e.problem, 404)
        except BallTrajError as e:
            return error_page(e.one_line(), 422)
        cam = camera_path(p)
        return page("clip.html", clip=rel, info=info, has_camera=cam.is_file(), camera_name=cam.name)

    async def frame(request: Request):
        try:
            p, _ = clip_of(request)
            k = _int(request.query_params.get("k", "0"), "frame")
            data = await run_in_threadpool(frames.jpeg, p, k)
        except OutsideFolder as e:
            return Response(e.problem, 404, media_type="text/plain")
        except BallTrajError as e:
            return Response(e.one_line(), 400, media_type="text/plain")
        return Response(data, media_type="image/jpeg", headers={"Cache-Control": "private, max-age=60"})

    @api
    async def clip_info(request: Request):
        p, rel = clip_of(request)
        info = await run_in_threadpool(frames.info, p)
        cam = _camera_of(p)
        return JSONResponse({"clip": rel, **info, "camera": None if cam is None else cam.to_dict(),
                             "clicked": _saved_clicks(camera_path(p)) if cam is not None else None,
                             "camera_file": camera_path(p).name, "balls": ball_names(),
                             "turn_default": sorted(TOWARD_ORIGIN),
                             "templates": {k: {"frame": v["frame"], "rule": v["rule"],
                                               "points": {n: list(x) for n, x in v["points"].items()}}
                                           for k, v in TEMPLATES.items()}})

    @api
    async def calibrate(request: Request):
        b = await body(request)
        p = inside(root, _str(b.get("path"), "path"))
        info = await run_in_threadpool(frames.info, p)
        template = _str(b.get("template"), "template")
        if template not in TEMPLATES:
            raise InputError(f"unknown template {template!r}")
        clicks = b.get("clicks")
        if not isinstance(clicks, dict) or len(clicks) > 50:
            raise InputError("clicks must be an object of landmark name -> [u, v]")
        clicks = {_str(k, "landmark"): _pixel(v) for k, v in clicks.items()}
        if len(clicks) < 4:
            return JSONResponse({"need": 4 - len(clicks)})
        lens_file = p.with_name("lens.json")
        lens = read_cameras(lens_file)[0] if lens_file.is_file() else None
        res = await run_in_threadpool(calibrate_clicks, template, clicks, (info["width"], info["height"]), name=p.stem, lens=lens,
                               turn=b.get("turn") if isinstance(b.get("turn"), bool) else None)
        out = {"rms_px": res.rms_px, "errors_px": res.errors_px, "pose": res.pose_text(), "frame": res.frame,
               "turned": res.turned, "camera": res.camera.to_dict(),
               "template_px": template_pixels(res, template)}
        if b.get("save") is True:
            d = res.camera.to_dict()
            d["calibration"] = {"kind": "scene", "world_frame": res.frame, "rms_px": res.rms_px,
                                "landmark_errors_px": res.errors_px, "template": template, "turned": res.turned,
                                "focal_estimated_from_landmarks": lens is None, "clicked_px": clicks,
                                "from": "balltraj workbench"}
            write_json(camera_path(p), d)
            out["saved"] = camera_path(p).name
        return JSONResponse(out)

    @api
    async def anchor(request: Request):
        b = await body(request)
        p = inside(root, _str(b.get("path"), "path"))
        cam = _camera_of(p)
        if cam is None:
            raise InputError("save a camera for this clip first (calibrate by clicking the landmarks)")
        u, v = _pixel(b.get("uv"))
        ball = get_ball(_str(b.get("ball"), "ball"))
        height = _num(b.get("height_m"), "height", lo=0.0, hi=10.0, default=ball.radius_m)
        X = ground_point(cam, (u, v), height)
        return JSONResponse({"start_near_m": X.tolist(), "height_m": height})

    @api
    async def analyze(request: Request):
        b = await body(request)
        p = inside(root, _str(b.get("path"), "path"))
        cam = _camera_of(p)
        if cam is None:
            raise InputError("save a camera for this clip first (calibrate by clicking the landmarks)")
        ball = get_ball(_str(b.get("ball"), "ball"))
        air = air_conditions(temperature_c=_num(b.get("temperature_c"), "temperature", lo=-30, hi=50),
                             altitude_m=_num(b.get("altitude_m"), "altitude", lo=-500, hi=5000))
        start = b.get("start_near_m")
        start = None if start is None else tuple(_num(x, "start point", lo=-1e4, hi=1e4) for x in _seq(start, 3))
        settings = pipeline.FitSettings(ball, air, target_x_m=_num(b.get("target_x_m"), "target x", lo=-1e4, hi=1e4),
                                        start_near_m=start)
        labels = {k: _label(b.get(k), k) for k in ("athlete", "session")}
        job = jobs.start(pipeline.ClipInput(p, [cam]), _rel(p), settings, labels)
        return JSONResponse({"job": job.id})

    def _rel(p: Path) -> str:
        return p.relative_to(root).as_posix()

    @api
    async def job_state(request: Request):
        return JSONResponse(jobs.get(request.path_params["job"]).summary(_units(request.query_params.get("units"))))

    @api
    async def refit_flight(request: Request):
        b = await body(request)
        job = jobs.get(_str(b.get("job"), "job"))
        keep = b.get("keep")
        if not isinstance(keep, list) or len(keep) > 100000 or not all(isinstance(k, bool) for k in keep):
            raise InputError("keep must be a list of true/false, one a tracked point")
        await run_in_threadpool(refit, job, int(_num(b.get("flight"), "flight", lo=0, hi=1000)), keep)
        return JSONResponse(job.summary(_units(b.get("units"))))

    @api
    async def save(request: Request):
        b = await body(request)
        job = jobs.get(_str(b.get("job"), "job"))
        stored = await run_in_threadpool(save_to_library, job, lib_path)
        return JSONResponse({"stored": stored, "library": lib_path.name})

    async def report(request: Request):
        try:
            job = jobs.get(request.path_params["job"])
        except BallTrajError as e:
            return error_page(e.one_line(), 404)
        recs = [r for r in job.records if r is not None]
        if not recs:
            return error_page("this analysis has no fitted flight to report", 404)
        html = await run_in_threadpool(job.report, _units(request.query_params.get("units")), build_report)
        return HTMLResponse(html, headers={"Content-Security-Policy": REPORT_CSP})

    async def history_page(request: Request):
        q = request.query_params
        try:
            ctx = await run_in_threadpool(history.view, lib_path, q.get("by", "athlete"), q.get("a"), q.get("b"))
        except BallTrajError as e:
            return error_page(e.one_line(), 400)
        return page("history.html", **ctx)

    async def compare_flights(request: Request):
        ids = request.query_params.getlist("f")
        if len(ids) != 2 or not all(i.isdigit() and len(i) < 10 for i in ids):
            return error_page("tick exactly two flights to compare", 400)
        try:
            recs, titles = await run_in_threadpool(history.flight_records, lib_path, ids)
        except BallTrajError as e:
            return error_page(e.one_line(), 404)
        html = await run_in_threadpool(build_report, recs, titles)
        return HTMLResponse(html, headers={"Content-Security-Policy": REPORT_CSP})

    async def not_found(request: Request, exc):
        return error_page("there is nothing at this address", 404)

    async def server_error(request: Request, exc):
        return error_page(f"internal error ({type(exc).__name__}); this is a bug in balltraj, please report it", 500)

    routes = [
        Route("/", index), Route("/clip", clip_page), Route("/frame", frame), Route("/history", history_page),
        Route("/compare", compare_flights),
        Route("/report/{job}", report),
        Route("/api/clip", clip_info), Route("/api/calibrate", calibrate, methods=["POST"]),
        Route("/api/anchor", anchor, methods=["POST"]), Route("/api/analyze", analyze, methods=["POST"]),
        Route("/api/job/{job}", job_state), Route("/api/refit", refit_flight, methods=["POST"]),
        Route("/api/save", save, methods=["POST"]),
        Mount("/static", StaticFiles(directory=str(HERE / "static")), name="static"),
    ]
    mw = [Middleware(TrustedHostMiddleware, allowed_hosts=list(allowed_hosts)), Middleware(SafeHeaders)]
    app = Starlette(routes=routes, middleware=mw, exception_handlers={404: not_found, 500: server_error})
    app.state.root, app.state.jobs, app.state.library = root, jobs, lib_path

    return app


def _camera_of(clip: Path):
    p = camera_path(clip)
    return read_cameras(p)[0] if p.is_file() else None


def _saved_clicks(path: Path):
    """The template and clicked pixels a workbench camera file was made from (None for other files)."""
    cal = read_json(path).get("calibration") or {}
    clicks, template = cal.get("clicked_px"), cal.get("template")
    if cal.get("from") != "balltraj workbench" or template not in TEMPLATES or not isinstance(clicks, dict):
        return None
    try:
        return {"template": template, "turned": cal.get("turned") is True, "clicks": {_str(k, "landmark"): list(_pixel(v)) for k, v in clicks.items()
                                                 if k in TEMPLATES[template]["points"]}}
    except InputError:
        return None


def _units(x) -> str:
    return "imperial" if x == "imperial" else "metric"


def _reject(name):
    raise ValueError(name)


def _str(x, what: str) -> str:
    if not isinstance(x, str) or not x or len(x) > 500:
        raise InputError(f"{what} must be a short text")
    return x


def _label(x, what: str):
    if x is None or x == "":
        return None
    if not isinstance(x, str) or len(x) > MAX_LABEL_CHARS:
        raise InputError(f"{what} must be a text of at most {MAX_LABEL_CHARS} characters")
    return " ".join(x.split())


def _num(x, what: str, *, lo: float, hi: float, default=None):
    if x is None or x == "":
        return default
    if isinstance(x, bool) or not isinstance(x, (int, float)) or not math.isfinite(x) or not lo <= x <= hi:
        raise InputError(f"{what} must be a number from {lo:g} to {hi:g}")
    return float(x)


def _int(x: str, what: str) -> int:
    if not x.isdigit() or len(x) > 7:
        raise InputError(f"{what} must be a whole number")
    return int(x)


def _seq(x, n: int) -> list:
    if not isinstance(x, list) or len(x) != n:
        raise InputError(f"give {n} numbers")
    return x


def _pixel(x) -> tuple[float, float]:
    u, v = (_num(c, "a pixel coordinate", lo=-1e5, hi=1e5) for c in _seq(x, 2))
    if u is None or v is None:
        raise InputError("a pixel needs u and v")
    return u, v
