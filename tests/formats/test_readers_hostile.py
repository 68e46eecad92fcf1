"""Property-based fuzzing of every reader: random and mutated inputs either parse into valid objects
or raise the project's input error, never anything else."""
import json
import string

import numpy as np
from hypothesis import given, settings, strategies as st

from balltraj.errors import BallTrajError
from balltraj.formats import (read_ball_file, read_cameras, read_flight_file, read_observations_csv,
                              read_track_csv)

from synth import make_track

T, XYZ, _ = make_track("baseball", seed=0)
GOOD_TRACK = "t,x,y,z,sigma\n" + "\n".join(f"{a:.6f},{p[0]:.5f},{p[1]:.5f},{p[2]:.5f},0.005"
                                           for a, p in zip(T[:40], XYZ[:40])) + "\n"
GOOD_OBS = "t,camera,u,v,radius_px,flight\n" + "\n".join(f"{a:.6f},side,{100 + 10 * i:.3f},{300 - i:.3f},3.1,1"
                                                         for i, a in enumerate(T[:40])) + "\n"
GOOD_CAMERA = json.dumps({"name": "side", "image_size": [1280, 720], "K": [[1400, 0, 640], [0, 1400, 360], [0, 0, 1]],
                          "dist": [-0.1, 0.01, 0, 0, 0], "rvec": [1.2, 0.1, 0.0], "tvec": [0.1, 1.0, 12.0]})
GOOD_BALL = json.dumps({"name": "foam", "mass_kg": 0.02, "diameter_m": 0.09})

text = st.text(alphabet=string.printable + "éß中\x00\ufeff", max_size=400)


def mutate(s: str, data) -> str:
    """Random edits of a valid file: delete, duplicate, replace or insert characters and lines."""
    chars = list(s)
    for _ in range(data.draw(st.integers(1, 8))):
        if not chars:
            chars = list(data.draw(st.sampled_from(["", ",", "t,x\n"])))
            continue
        i = data.draw(st.integers(0, len(chars) - 1))
        op = data.draw(st.sampled_from(["del", "dup", "rep", "ins", "line"]))
        if op == "del":
            del chars[i]
        elif op == "dup":
            chars.insert(i, chars[i])
        elif op == "rep":
            chars[i] = data.draw(st.sampled_from(list(",;.-e9\n\"{}[]:x \t")))
        elif op == "ins":
            chars.insert(i, data.draw(st.sampled_from(["nan", "inf", "-", "1e309", ",", "\n", "null", "true", "é"])))
        else:
            lines = "".join(chars).split("\n")
            j = data.draw(st.integers(0, len(lines) - 1))
            lines.insert(j, lines[j])
            chars = list("\n".join(lines))
    return "".join(chars)


def check_reader(tmp_path, reader, content, name):
    p = tmp_path / name
    p.write_bytes(content.encode("utf-8", errors="surrogatepass") if isinstance(content, str) else content)
    try:
        out = reader(p)
    except BallTrajError as e:
        assert str(p) in str(e) or e.path is not None
        return None
    return out


@settings(max_examples=60)
@given(data=st.data())
def test_track_reader_fuzz(tmp_path_factory, data):
    d = tmp_path_factory.mktemp("f")
    content = data.draw(st.one_of(text, st.just(GOOD_TRACK).map(lambda s: s)))
    content = mutate(content, data) if data.draw(st.booleans()) else content
    tr = check_reader(d, read_track_csv, content, "track file.csv")
    if tr is not None:
        assert np.all(np.isfinite(tr.xyz)) and np.all(np.diff(tr.t) > 0) and len(tr.t) >= 1


@settings(max_examples=60)
@given(data=st.data())
def test_observations_reader_fuzz(tmp_path_factory, data):
    d = tmp_path_factory.mktemp("f")
    content = mutate(GOOD_OBS, data) if data.draw(st.booleans()) else data.draw(text)
    obs = check_reader(d, read_observations_csv, content, "obs.csv")
    if obs is not None:
        assert np.all(np.isfinite(obs.uv)) and len(obs.camera) == len(obs.t)


@settings(max_examples=60)
@given(data=st.data())
def test_camera_reader_fuzz(tmp_path_factory, data):
    d = tmp_path_factory.mktemp("f")
    base = GOOD_CAMERA if data.draw(st.booleans()) else json.dumps({"cameras": [json.loads(GOOD_CAMERA)]})
    content = mutate(base, data) if data.draw(st.booleans()) else data.draw(text)
    cams = check_reader(d, read_cameras, content, "cam.json")
    if cams is not None:
        for c in cams:
            assert np.all(np.isfinite(c.K)) and abs(np.linalg.det(c.K)) > 0


@settings(max_examples=40)
@given(data=st.data())
def test_ball_reader_fuzz(tmp_path_factory, data):
    d = tmp_path_factory.mktemp("f")
    content = mutate(GOOD_BALL, data) if data.draw(st.booleans()) else data.draw(text)
    b = check_reader(d, read_ball_file, content, "ball.json")
    if b is not None:
        assert b.mass_kg > 0 and b.diameter_m > 0


@settings(max_examples=40)
@given(data=st.data())
def test_flight_reader_fuzz(tmp_path_factory, data):
    from balltraj.pipeline import Launch, simulate
    from balltraj.formats import write_json
    from balltraj.physics.air import air_conditions
    from balltraj.physics.balls import get_ball

    d = tmp_path_factory.mktemp("f")
    good = d / "good.json"
    if not good.exists():
        res = simulate(Launch((0, 0, 1.8), 40.0, 0.0, 0.0, 2000 * 2 * 3.141592653589793 / 60, (0, -1, 0)),
                       get_ball("baseball"), air_conditions(), target_x_m=18.0)
        write_json(good, res.record)
    content = mutate(good.read_text(), data) if data.draw(st.booleans()) else data.draw(text)
    rec = check_reader(d, read_flight_file, content, "flight.json")
    if rec is not None:
        assert rec["schema"] == "balltraj.flight/1"
