"""The balltraj command line: parse options, call the library, print. No computation here.

Heavy modules (scipy, matplotlib, cv2) are imported inside the commands that need them, so
``balltraj --help`` and a single fit start quickly.
"""

from __future__ import annotations

import functools
import os
import sys
from pathlib import Path

# quiet OpenCV's and FFmpeg's own console chatter (errors reach the user as one balltraj line)
os.environ.setdefault("OPENCV_LOG_LEVEL", "OFF")
os.environ.setdefault("OPENCV_FFMPEG_LOGLEVEL", "-8")
from typing import Annotated, List, Optional

import typer

from .errors import BallTrajError, InputError

app = typer.Typer(
    rich_markup_mode=None,
    add_completion=False,
    no_args_is_help=True,
    pretty_exceptions_enable=False,
    help="balltraj: what a thrown, pitched, kicked or struck ball really did. "
    "Bare numbers are SI (m, s, m/s); units such as 92mph, 2300rpm, 60.5ft are accepted where noted. "
    "Keep people and cameras out of the ball's path; results are estimates, not officiating decisions.",
)


def _echo(text: str = "") -> None:
    typer.echo(text)


def _fail(err: BallTrajError) -> None:
    typer.echo(f"error: {err.one_line()}", err=True)
    raise typer.Exit(2)


def _command(group: typer.Typer, name: Optional[str] = None):
    """Register a command whose function returns the text to print. A BallTrajError raised while it
    runs (reading its options included) becomes one line on stderr and exit status 2."""
    def register(fn):
        @functools.wraps(fn)
        def run(*args, **kwargs):
            try:
                text = fn(*args, **kwargs)
            except BallTrajError as e:
                _fail(e)
            _echo(text)

        return group.command(name)(run)

    return register


def _ball(name: str, ball_file: Optional[Path]):
    from .commands.common import load_ball

    return load_ball(name, ball_file)


def _si(text: Optional[str], kind: str, option: str) -> Optional[float]:
    """An option's value in SI (bare numbers are SI; units such as 92mph are converted)."""
    from .units import parse_quantity

    return None if text is None else parse_quantity(text, kind, option)


def _air(air_density, temperature, pressure, humidity, altitude):
    from .commands.common import air_from

    rho = _si(air_density, "density", "--air-density")
    if rho is not None and rho <= 0:
        raise InputError(f"--air-density must be positive, got {air_density}")
    p = None
    if pressure is not None:
        # the contract's bare pressure is hPa; a unit (Pa, kPa, inHg) may be given
        bare = str(pressure).strip().replace(".", "", 1).lstrip("+-").isdigit()
        p = _si(pressure, "pressure", "--pressure") * (100.0 if bare else 1.0)
    return air_from(density=rho, temperature_c=_si(temperature, "temperature", "--temperature"), pressure_pa=p,
                    humidity_pct=_si(humidity, "temperature", "--humidity"),
                    altitude_m=_si(altitude, "length", "--altitude"))


def _vector(text: Optional[str], option: str):
    from .units import parse_vector

    return None if text is None else parse_vector(text, option)


def _settings(ball, air, target_x, start_near, start_sigma, fit_drag=False, free_lift=False):
    """The fit settings from the options, every unit in SI."""
    import math

    from .pipeline import FitSettings

    if not (math.isfinite(start_sigma) and start_sigma > 0):
        raise InputError(f"--start-sigma must be a positive number of metres, got {start_sigma}")
    return FitSettings(ball=ball, air=air, target_x_m=_si(target_x, "length", "--target-x"),
                       start_near_m=_vector(start_near, "--start-near"), start_sigma_m=start_sigma,
                       fit_drag=fit_drag, free_lift=free_lift)


# options shared by several commands, declared once
AirDensityOpt = Annotated[Optional[str], typer.Option("--air-density", help="Air density [kg/m^3]; or give "
                                                       "--temperature/--pressure/--humidity/--altitude.")]
TemperatureOpt = Annotated[Optional[str], typer.Option("--temperature", help="Air temperature [deg C].")]
PressureOpt = Annotated[Optional[str], typer.Option("--pressure", help="Station pressure [hPa] (or 101325pa).")]
HumidityOpt = Annotated[Optional[str], typer.Option("--humidity", help="Relative humidity [%].")]
AltitudeOpt = Annotated[Optional[str], typer.Option("--altitude", help="Altitude above sea level [m] (or 5280ft).")]
BallFileOpt = Annotated[Optional[Path], typer.Option("--ball-file", help="JSON file defining an extra ball.")]
StartNearOpt = Annotated[Optional[str], typer.Option("--start-near", help="Rough start point X,Y,Z [m] (release point, ball spot).")]
StartSigmaOpt = Annotated[float, typer.Option("--start-sigma", help="How rough --start-near is [m].")]
CaptureFpsOpt = Annotated[Optional[float], typer.Option("--capture-fps", help="True capture rate of a slow-motion file stored time-stretched.")]


@_command(app)
def simulate(
    ball: str = typer.Option(..., "--ball", help="Ball name (see `balltraj balls`)."),
    position: str = typer.Option(..., "--position", help="Launch point X,Y,Z [m]."),
    speed: str = typer.Option(..., "--speed", help="Launch speed [m/s], or e.g. 92mph, 150kmh."),
    elevation: str = typer.Option(..., "--elevation", help="Launch angle above horizontal [deg]."),
    azimuth: str = typer.Option("0", "--azimuth", help="Launch direction from +x toward +y (left) [deg]."),
    spin_rpm: str = typer.Option(..., "--spin-rpm", help="Spin rate [rpm] (or 230rad/s, 38rps)."),
    spin_axis: str = typer.Option(..., "--spin-axis",
                                  help="Spin axis X,Y,Z, right-hand rule (backspin toward +x: 0,-1,0)."),
    drag_coefficient: Optional[float] = typer.Option(None, "--drag-coefficient", help="Constant C_D instead of the ball's model."),
    lift_model: Optional[str] = typer.Option(None, "--lift-model", help="Lift model name (see `balltraj balls --models`)."),
    lift_coefficient: Optional[float] = typer.Option(None, "--lift-coefficient", help="Constant C_L instead of a model."),
    spin_decay: Optional[float] = typer.Option(None, "--spin-decay", help="Spin decay time constant [s]."),
    air_density: AirDensityOpt = None,
    temperature: TemperatureOpt = None,
    pressure: PressureOpt = None,
    humidity: HumidityOpt = None,
    altitude: AltitudeOpt = None,
    target_x: Optional[str] = typer.Option(None, "--target-x", help="Target plane x [m] (default: landing point)."),
    ball_file: BallFileOpt = None,
    path_csv: Optional[Path] = typer.Option(None, "--path-csv", help="Also write the sampled path (t,x,y,z,vx,vy,vz)."),
    out: Path = typer.Option(..., "-o", "--out", help="Flight file to write (JSON)."),
):
    """Predict a flight from a launch state and spin; write a flight file."""
    import math

    from .commands.fit import run_simulate
    from .pipeline import Launch
    from .units import RPM

    rate = _si(spin_rpm, "spin", "--spin-rpm")
    bare = str(spin_rpm).strip().lstrip("+-").replace(".", "", 1).isdigit()
    rate = rate * RPM if bare else rate  # a bare --spin-rpm is rpm
    if not math.isfinite(rate) or rate < 0:
        raise InputError(f"--spin-rpm must be zero or positive, got {spin_rpm}")
    el = _si(elevation, "angle", "--elevation")
    if abs(el) > math.pi / 2:
        raise InputError(f"--elevation must be within -90..90 degrees, got {elevation}")
    from .units import parse_vector

    launch = Launch(position_m=_vector(position, "--position"), speed_mps=_si(speed, "speed", "--speed"),
                    elevation_rad=el, azimuth_rad=_si(azimuth, "angle", "--azimuth"), spin_radps=rate,
                    spin_axis=parse_vector(spin_axis, "--spin-axis", kind="length"))
    return run_simulate(
        ball=_ball(ball, ball_file), air=_air(air_density, temperature, pressure, humidity, altitude), launch=launch,
        drag_coefficient=drag_coefficient, lift_model=lift_model, lift_coefficient=lift_coefficient,
        spin_decay_s=spin_decay, target_x_m=_si(target_x, "length", "--target-x"), path_csv=path_csv, out=out,
    )


@_command(app)
def fit(
    inputs: List[Path] = typer.Argument(..., help="Track CSV(s) (t,x,y,z[,sigma])."),
    ball: str = typer.Option(..., "--ball", help="Ball name (see `balltraj balls`)."),
    target_x: Optional[str] = typer.Option(None, "--target-x", help="Target plane x [m] (default: last tracked x)."),
    camera: Optional[Path] = typer.Option(None, "--camera", help="Camera or rig file: fit pixel observations (t,camera,u,v) in image space."),
    flight: Optional[int] = typer.Option(None, "--flight", help="Which flight of an observations file with a flight column."),
    start_near: StartNearOpt = None,
    start_sigma: StartSigmaOpt = 0.3,
    fit_drag: bool = typer.Option(False, "--fit-drag", help="Also fit a scale on the drag model."),
    free_lift: bool = typer.Option(False, "--free-lift", help="Fit a free constant lift coefficient instead of the ball's lift model."),
    air_density: AirDensityOpt = None,
    temperature: TemperatureOpt = None,
    pressure: PressureOpt = None,
    humidity: HumidityOpt = None,
    altitude: AltitudeOpt = None,
    ball_file: BallFileOpt = None,
    athlete: Optional[str] = typer.Option(None, "--athlete", help="Athlete name, kept in the flight file."),
    session: Optional[str] = typer.Option(None, "--session", help="Session name, kept in the flight file."),
    notes: Optional[str] = typer.Option(None, "--notes", help="Free text kept in the flight file."),
    path_csv: Optional[Path] = typer.Option(None, "--path-csv", help="Write fitted and no-spin paths and their difference."),
    out: Path = typer.Option(..., "-o", "--out", help="Flight file (one input) or folder (several)."),
):
    """Fit the flight model to tracked positions: launch state, transverse spin, deflection."""
    from .commands.fit import run_fit

    settings = _settings(_ball(ball, ball_file), _air(air_density, temperature, pressure, humidity, altitude),
                         target_x, start_near, start_sigma, fit_drag, free_lift)
    return run_fit(inputs=inputs, settings=settings, path_csv=path_csv, out=out,
                   labels={"athlete": athlete, "session": session, "notes": notes}, camera=camera, flight=flight)


@_command(app)
def report(
    flights: List[Path] = typer.Argument(..., help="Flight file(s) (JSON) from fit, simulate or analyze."),
    units: str = typer.Option("metric", "--units", help="metric or imperial."),
    fmt: str = typer.Option("html", "--format", help="html (any number of flights), png or pdf (one flight)."),
    what_if_altitude: List[float] = typer.Option([], "--what-if-altitude", help="Also re-fly at this altitude [m]."),
    what_if_temperature: List[float] = typer.Option([], "--what-if-temperature", help="Also re-fly at this temperature [deg C]."),
    out: Path = typer.Option(..., "-o", "--out", help="Report file to write."),
):
    """Write a report a coach can read: headline numbers, paths with and without spin, fit quality."""
    from .commands.report import run_report

    return run_report(flights=flights, units=units, out=out, fmt=fmt, altitudes=what_if_altitude,
                      temperatures=what_if_temperature)


@_command(app)
def balls(models: bool = typer.Option(False, "--models", help="Also list the aerodynamic models.")):
    """List the ball catalogue (sizes from each game's rules) and the aerodynamic models."""
    from .commands.fit import run_balls

    return run_balls(models)


@_command(app)
def demo(out: Path = typer.Option(Path("balltraj-demo"), "--out", help="Folder for the results.")):
    """Run the whole job on the bundled sample session and print a summary."""
    from .commands.demo import run_demo

    return run_demo(out, show_progress=sys.stderr.isatty())


@_command(app)
def track(
    clip: Path = typer.Argument(..., help="Video clip."),
    camera: Optional[Path] = typer.Option(None, "--camera", help="Camera file (gates the ball's size in pixels)."),
    ball: str = typer.Option("baseball", "--ball", help="Ball name (its size gates detections)."),
    capture_fps: CaptureFpsOpt = None,
    overlay: Optional[Path] = typer.Option(None, "--overlay", help="Also write a video with detections and tracks drawn."),
    start: float = typer.Option(0.0, "--start", help="Skip the clip before this time [s] (decoded in order, never seeked)."),
    end: Optional[float] = typer.Option(None, "--end", help="Stop reading after this time [s]."),
    ball_file: BallFileOpt = None,
    out: Path = typer.Option(..., "-o", "--out", help="Observations CSV to write."),
):
    """Find and track the ball in a clip; write timed pixel observations, one flight id per throw."""
    from .commands.video import run_track

    return run_track(clip=clip, camera=camera, ball=_ball(ball, ball_file), capture_fps=capture_fps, out=out,
                     overlay=overlay, show_progress=sys.stderr.isatty(), start_s=start, end_s=end)


@_command(app)
def analyze(
    clip: Path = typer.Argument(..., help="Video clip."),
    camera: Path = typer.Option(..., "--camera", help="Camera file of the camera that filmed the clip."),
    ball: str = typer.Option(..., "--ball", help="Ball name."),
    target_x: Optional[str] = typer.Option(None, "--target-x", help="Target plane x [m] (default: last tracked x)."),
    start_near: StartNearOpt = None,
    start_sigma: StartSigmaOpt = 0.3,
    capture_fps: CaptureFpsOpt = None,
    air_density: AirDensityOpt = None,
    temperature: TemperatureOpt = None,
    pressure: PressureOpt = None,
    humidity: HumidityOpt = None,
    altitude: AltitudeOpt = None,
    athlete: Optional[str] = typer.Option(None, "--athlete", help="Athlete name, kept in the flight files."),
    session: Optional[str] = typer.Option(None, "--session", help="Session name, kept in the flight files."),
    ball_file: BallFileOpt = None,
    out: Path = typer.Option(..., "--out", help="Folder for observations.csv, flight.json and report.html."),
):
    """The whole job on one clip: track, fit in image space, report."""
    from .commands.video import run_analyze

    settings = _settings(_ball(ball, ball_file), _air(air_density, temperature, pressure, humidity, altitude),
                         target_x, start_near, start_sigma)
    return run_analyze(clip=clip, camera=camera, settings=settings, capture_fps=capture_fps, out=out,
                       labels={"athlete": athlete, "session": session}, show_progress=sys.stderr.isatty())


@_command(app)
def render(
    flight: Path = typer.Argument(..., help="Flight file (e.g. from simulate) whose flight to show."),
    camera: Path = typer.Option(..., "--camera", help="Camera file to film it with."),
    fps: float = typer.Option(240.0, "--fps", help="Frames per second."),
    duration: Optional[float] = typer.Option(None, "--duration", help="Clip length [s] (default: the flight plus margins)."),
    start: float = typer.Option(0.2, "--start", help="When the flight starts in the clip [s]."),
    exposure: float = typer.Option(0.001, "--exposure", help="Shutter time [s] (motion blur)."),
    noise: float = typer.Option(2.0, "--noise", help="Sensor noise (grey levels)."),
    seed: int = typer.Option(0, "--seed", help="Random seed of the scene."),
    out: Path = typer.Option(..., "-o", "--out", help="Clip to write (.mp4, mp4v codec); truth goes beside it."),
):
    """Render a synthetic practice clip of a flight, with its truth (for checks and demos)."""
    from .commands.video import run_render

    return run_render(flight=flight, camera=camera, out=out, fps=fps, duration=duration, start=start,
                      exposure=exposure, noise=noise, seed=seed)


@_command(app)
def batch(
    folder: Path = typer.Argument(..., help="Folder of clips."),
    camera: Path = typer.Option(..., "--camera", help="Camera file of the camera that filmed the clips."),
    ball: str = typer.Option(..., "--ball", help="Ball name."),
    library: Path = typer.Option(..., "--library", help="Library file (SQLite; created if missing)."),
    workers: int = typer.Option(1, "--workers", help="Local worker processes."),
    cluster: Optional[str] = typer.Option(None, "--cluster", help="Dask scheduler address (tcp://host:8786)."),
    target_x: Optional[str] = typer.Option(None, "--target-x", help="Target plane x [m]."),
    start_near: StartNearOpt = None,
    start_sigma: StartSigmaOpt = 0.3,
    capture_fps: CaptureFpsOpt = None,
    air_density: AirDensityOpt = None,
    temperature: TemperatureOpt = None,
    pressure: PressureOpt = None,
    humidity: HumidityOpt = None,
    altitude: AltitudeOpt = None,
    session: Optional[str] = typer.Option(None, "--session", help="Session name for these clips."),
    athlete: Optional[str] = typer.Option(None, "--athlete", help="Athlete name for these clips."),
    ball_file: BallFileOpt = None,
):
    """Analyse every clip in a folder into the flight library; resumable, never doubles a clip."""
    from .commands.library import run_batch_cmd

    settings = _settings(_ball(ball, ball_file), _air(air_density, temperature, pressure, humidity, altitude),
                         target_x, start_near, start_sigma)
    return run_batch_cmd(folder=folder, camera=camera, settings=settings, library=library, workers=workers,
                         cluster=cluster, capture_fps=capture_fps, session=session, athlete=athlete,
                         show_progress=sys.stderr.isatty())


library_app = typer.Typer(rich_markup_mode=None, help="The flight library: list, show, export and compare analysed clips.",
                          no_args_is_help=True)
app.add_typer(library_app, name="library")


@_command(library_app, "list")
def library_list(library: Path = typer.Argument(..., help="Library file.")):
    """One line a clip: status, flights, session, athlete."""
    from .commands.library import run_library_list

    return run_library_list(library)


@_command(library_app, "show")
def library_show(library: Path = typer.Argument(..., help="Library file."),
                 clip: str = typer.Argument(..., help="Clip id, path or file name.")):
    """The flights of one clip."""
    from .commands.library import run_library_show

    return run_library_show(library, clip)


@_command(library_app, "export")
def library_export(
    library: Path = typer.Argument(..., help="Library file."),
    out: Path = typer.Option(..., "-o", "--out", help="CSV (or Parquet) file to write."),
    per_flight: bool = typer.Option(False, "--per-flight", help="One row a flight instead of one a clip."),
    fmt: str = typer.Option("csv", "--format", help="csv or parquet."),
):
    """Export the library: one row a clip with source, status and the headline results."""
    from .commands.library import run_library_export

    return run_library_export(library, out, per_flight, fmt)


@_command(library_app, "compare")
def library_compare(
    library: Path = typer.Argument(..., help="Library file."),
    a: str = typer.Argument(..., help="First session or athlete."),
    b: str = typer.Argument(..., help="Second session or athlete."),
    by: str = typer.Option("session", "--by", help="session or athlete."),
):
    """Mean and spread of speed, transverse spin and deflection for two sessions or athletes."""
    from .commands.library import run_library_compare

    return run_library_compare(library, by, a, b)


calibrate_app = typer.Typer(rich_markup_mode=None, help="Calibrate cameras: a printable board, the lens from board views, the scene "
                            "(camera pose) from field landmarks.", no_args_is_help=True)
app.add_typer(calibrate_app, name="calibrate")


@_command(calibrate_app, "board")
def calibrate_board(
    cols: int = typer.Option(9, "--cols", help="Inner corners across."),
    rows: int = typer.Option(6, "--rows", help="Inner corners down."),
    square_mm: float = typer.Option(30.0, "--square-mm", help="Square size [mm]."),
    out: Path = typer.Option(..., "-o", "--out", help="Board file; writes NAME.png and NAME.pdf."),
):
    """Write a printable checkerboard (PNG and PDF) at a stated square size."""
    from .commands.calibrate import run_calibrate_board

    return run_calibrate_board(cols=cols, rows=rows, square_mm=square_mm, out=out)


@_command(calibrate_app, "lens")
def calibrate_lens_cmd(
    inputs: List[Path] = typer.Argument(..., help="Images of the printed board, or a video of it."),
    cols: int = typer.Option(9, "--cols", help="Inner corners across."),
    rows: int = typer.Option(6, "--rows", help="Inner corners down."),
    square_mm: float = typer.Option(30.0, "--square-mm", help="Square size as printed [mm]."),
    name: str = typer.Option("camera", "--name", help="Camera name."),
    every: int = typer.Option(10, "--every", help="With a video: use every Nth frame."),
    out: Path = typer.Option(..., "-o", "--out", help="Lens (camera) file to write."),
):
    """Calibrate the lens (focal length, centre, distortion) from views of a checkerboard."""
    from .commands.calibrate import run_calibrate_lens

    return run_calibrate_lens(inputs=inputs, cols=cols, rows=rows, square_mm=square_mm, name=name, out=out,
                              every=every)


@_command(calibrate_app, "scene")
def calibrate_scene_cmd(
    landmarks: Optional[Path] = typer.Option(None, "--landmarks", help="CSV of landmarks: x,y,z,u,v[,name]."),
    template: Optional[str] = typer.Option(None, "--template", help="Field markings: baseball-pitch, soccer-goal, "
                                           "tennis-court, cricket-pitch."),
    points: Optional[Path] = typer.Option(None, "--points", help="With --template: CSV name,u,v of the marks seen."),
    lens: Optional[Path] = typer.Option(None, "--lens", help="Lens file from `calibrate lens`."),
    image_size: Optional[str] = typer.Option(None, "--image-size", help="WxH when there is no lens file."),
    name: str = typer.Option("camera", "--name", help="Camera name."),
    out: Path = typer.Option(..., "-o", "--out", help="Camera file to write."),
):
    """Place the camera in the world frame from landmarks whose positions are known."""
    from .commands.calibrate import run_calibrate_scene

    return run_calibrate_scene(landmarks=landmarks, template=template, points=points, lens=lens,
                               image_size=image_size, name=name, out=out)


@_command(app)
def triangulate(
    observations: Path = typer.Argument(..., help="Observations CSV (t,camera,u,v) from two or more cameras."),
    camera: Path = typer.Option(..., "--camera", help="Rig file with every camera."),
    flight: Optional[int] = typer.Option(None, "--flight", help="Which flight, when the file has a flight column."),
    out: Path = typer.Option(..., "-o", "--out", help="3D track CSV to write."),
):
    """Export a 3D track (t,x,y,z) triangulated from two or more calibrated cameras."""
    from .commands.calibrate import run_triangulate

    return run_triangulate(observations=observations, camera=camera, out=out, flight=flight)


def main() -> None:
    """Entry point: every way out is an exit status and at most one line on stderr."""
    try:  # typer ships its own copy of click in recent versions
        from typer import _click as click  # type: ignore[attr-defined]
    except ImportError:  # pragma: no cover - older typer uses click itself
        import click

    exc = click.exceptions
    abort = getattr(exc, "Abort", KeyboardInterrupt)
    try:
        rv = app(standalone_mode=False)
    except SystemExit:
        raise
    except getattr(exc, "NoArgsIsHelpError", ()):  # bare `balltraj` or a bare group: help was shown
        sys.exit(0)
    except exc.UsageError as e:
        cmd = e.ctx.command_path if e.ctx is not None else "balltraj"
        typer.echo(f"error: {' '.join(e.format_message().split())}; see '{cmd} --help'", err=True)
        sys.exit(2)
    except abort:
        typer.echo("error: interrupted; no partial output was left", err=True)
        sys.exit(130)
    except getattr(exc, "Exit", typer.Exit) as e:
        sys.exit(e.exit_code)
    except KeyboardInterrupt:
        typer.echo("error: interrupted; no partial output was left", err=True)
        sys.exit(130)
    except BrokenPipeError:
        sys.exit(0)
    except Exception as e:  # a bug: say so, briefly
        typer.echo(f"error: internal error ({type(e).__name__}: {' '.join(str(e).split())}); this is a bug in "
                   "balltraj, please report it with the command you ran", err=True)
        sys.exit(1)
    sys.exit(rv if isinstance(rv, int) else 0)
