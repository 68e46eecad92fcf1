import json
import re
import shutil
import subprocess
import sys
import xml.etree.ElementTree as ET

import pytest
from typer.testing import CliRunner

from balltraj.cli import app
from balltraj.record.refly import record_paths, what_if

from synth import make_track, write_track

runner = CliRunner()


@pytest.fixture(scope="module")
def flight_file(tmp_path_factory):
    d = tmp_path_factory.mktemp("rep")
    t, xyz, _ = make_track("baseball", seed=21)
    p = d / "pitch.csv"
    write_track(p, t, xyz)
    out = d / "flight.json"
    r = runner.invoke(app, ["fit", str(p), "--ball", "baseball", "--target-x", "17", "-o", str(out),
                            "--athlete", "Ana <b>&\"Q\"</b>", "--session", "Tues & Thurs"])
    assert r.exit_code == 0, r.output
    return out


def test_report_html_is_self_contained_and_escaped(flight_file, tmp_path):
    out = tmp_path / "r.html"
    r = runner.invoke(app, ["report", str(flight_file), "-o", str(out)])
    assert r.exit_code == 0, r.output
    page = out.read_text()
    # the athlete's name is escaped (&quot; or &#34; for the quote, both HTML), never raw markup
    assert re.search(r"Ana &lt;b&gt;&amp;(&quot;|&#34;)Q(&quot;|&#34;)&lt;/b&gt;", page) and "<b>&" not in page
    # nothing to fetch: no external src/href/url() (xmlns namespace names are not requests)
    assert not re.search(r"""(src|href)\s*=\s*["']?(https?:|//)""", page)
    assert "url(http" not in page and "@import" not in page
    assert page.count("<svg") >= 5
    rec = json.loads(flight_file.read_text())
    assert f"{rec['launch']['speed_mps'] * 3.6:.1f}" in page  # headline speed in km/h
    assert "not officiating decisions" in page


def test_imperial_units(flight_file, tmp_path):
    out = tmp_path / "r.html"
    assert runner.invoke(app, ["report", str(flight_file), "--units", "imperial", "-o", str(out)]).exit_code == 0
    rec = json.loads(flight_file.read_text())
    # Source: 1 mph = 0.44704 m/s (exact)
    assert f"{rec['launch']['speed_mps'] / 0.44704:.1f} ±" in out.read_text()
    assert " in " in out.read_text()


def test_plotted_target_plane_data_match_the_record(flight_file):
    rec = json.loads(flight_file.read_text())
    p = record_paths(rec)
    # the re-flown paths reproduce the recorded crossings and deflection
    assert p.crossing[1] - p.ref_crossing[1] == pytest.approx(rec["deflection"]["horizontal_m"], abs=1e-9)
    assert p.crossing[2] - p.ref_crossing[2] == pytest.approx(rec["deflection"]["vertical_m"], abs=1e-9)
    nospin = what_if(rec, no_spin=True)
    assert nospin["deflection_horizontal_m"] == pytest.approx(0, abs=1e-12)


def test_what_if_altitude_less_drag_and_lift(flight_file):
    rec = json.loads(flight_file.read_text())
    base = what_if(rec)
    high = what_if(rec, altitude_m=1609.0)  # thinner air: less spin deflection
    assert high["air_density_kg_m3"] < 0.9 * rec["model"]["air_density_kg_m3"]
    assert abs(high["deflection_vertical_m"]) < abs(base["deflection_vertical_m"])


def test_several_flights_and_png_pdf(flight_file, tmp_path):
    other = tmp_path / "other.json"
    rec = json.loads(flight_file.read_text())
    rec["athlete"] = "Someone Else"
    other.write_text(json.dumps(rec))
    out = tmp_path / "both.html"
    assert runner.invoke(app, ["report", str(flight_file), str(other), "-o", str(out)]).exit_code == 0
    assert "Flights side by side" in out.read_text() and "By athlete and session" in out.read_text()
    png, pdf = tmp_path / "one.png", tmp_path / "one.pdf"
    assert runner.invoke(app, ["report", str(flight_file), "--format", "png", "-o", str(png)]).exit_code == 0
    assert png.read_bytes()[:8] == b"\x89PNG\r\n\x1a\n"
    assert runner.invoke(app, ["report", str(flight_file), "--format", "pdf", "-o", str(pdf)]).exit_code == 0
    assert pdf.read_bytes()[:5] == b"%PDF-"


def test_svg_plots_parse(flight_file, tmp_path):
    out = tmp_path / "r.html"
    runner.invoke(app, ["report", str(flight_file), "-o", str(out)])
    page = out.read_text()
    i = page.index("<svg")
    j = page.index("</svg>", i) + 6
    ET.fromstring(page[i:j])


@pytest.mark.parametrize("content,needle", [("not json", "not valid JSON"),
                                            ('{"schema": "balltraj.flight/9"}', "schema"),
                                            ('{"schema": "balltraj.flight/1"}', "missing section")])
def test_bad_flight_files(tmp_path, content, needle):
    p = tmp_path / "f.json"
    p.write_text(content)
    r = subprocess.run([sys.executable, "-m", "balltraj", "report", str(p), "-o", str(tmp_path / "r.html")],
                       capture_output=True, text=True)
    assert r.returncode == 2 and needle in r.stderr and str(p) in r.stderr
    assert not (tmp_path / "r.html").exists()


def test_missing_key_is_named(flight_file, tmp_path):
    rec = json.loads(flight_file.read_text())
    del rec["spin"]["transverse_axis"]
    p = tmp_path / "f.json"
    p.write_text(json.dumps(rec))
    r = subprocess.run([sys.executable, "-m", "balltraj", "report", str(p), "-o", str(tmp_path / "r.html")],
                       capture_output=True, text=True)
    assert r.returncode == 2 and "spin.transverse_axis" in r.stderr


CHROMIUM = shutil.which("chromium") or shutil.which("chromium-browser")


@pytest.mark.browser
@pytest.mark.skipif(CHROMIUM is None and "CI" not in __import__("os").environ, reason="no chromium here")
def test_report_in_headless_browser(flight_file, tmp_path):
    assert CHROMIUM, "CI must install Debian's chromium (.ci/run does)"
    out = tmp_path / "r.html"
    runner.invoke(app, ["report", str(flight_file), "-o", str(out)])
    flags = ["--headless", "--no-sandbox", "--disable-gpu", "--disable-background-networking",
             "--disable-component-update", "--disable-sync", "--no-first-run", f"--user-data-dir={tmp_path / 'u'}"]
    shot = tmp_path / "shot.png"
    subprocess.run([CHROMIUM, *flags, "--window-size=900,1400", f"--screenshot={shot}", out.as_uri()],
                   capture_output=True, timeout=120)
    text = subprocess.run([CHROMIUM, *flags, "--dump-dom", out.as_uri()], capture_output=True, text=True,
                          timeout=120).stdout
    rec = json.loads(flight_file.read_text())
    assert f"{rec['launch']['speed_mps'] * 3.6:.1f}" in text
    assert f"{rec['spin']['transverse_rate_rpm']:.0f} ±" in text
    import matplotlib.image as mpimg

    img = mpimg.imread(shot)
    assert img.shape[0] > 1000 and img.std() > 0.05  # not blank


def test_report_survives_missing_optional_values(flight_file, tmp_path):
    # non-finite numbers are written as null; a report of such a file still renders
    rec = json.loads(flight_file.read_text())
    rec["baseline"]["spin_parameter"] = None
    rec["baseline"]["transverse_rate_rpm"] = None
    rec["baseline"]["deflection"] = None
    rec["uncertainty"]["spin"]["transverse_rate_rpm"] = None
    p = tmp_path / "nulls.json"
    p.write_text(json.dumps(rec))
    out = tmp_path / "r.html"
    r = runner.invoke(app, ["report", str(p), "-o", str(out)])
    assert r.exit_code == 0, r.output
    assert "—" in out.read_text()


# ------------------------------------------------------------------ issue 16: what a coach sees
PROBE = """<!DOCTYPE html><html><body style="margin:0"><iframe id="f" src="{name}"
style="width:{w}px;height:1500px;border:0"></iframe><pre id="probe"></pre><script>
document.getElementById('f').addEventListener('load',()=>{{const d=document.getElementById('f').contentDocument;
let small=1e9,cut=0;for(const t of d.querySelectorAll('svg text')){{const r=t.getBoundingClientRect();
if(r.height>0&&r.height<small)small=r.height;}}
for(const t of d.querySelectorAll('table')){{if(t.getBoundingClientRect().right>{w}+0.5&&!t.closest('.scroll'))cut++;}}
document.getElementById('probe').textContent='W='+d.documentElement.scrollWidth+' SMALL='+small+' CUT='+cut;}});
</script></body></html>"""


@pytest.mark.browser
@pytest.mark.skipif(CHROMIUM is None and "CI" not in __import__("os").environ, reason="no chromium here")
def test_report_on_a_phone(flight_file, tmp_path):
    other = tmp_path / "other.json"
    rec = json.loads(flight_file.read_text())
    rec["athlete"] = "Someone With A Rather Long Name"
    other.write_text(json.dumps(rec))
    out = tmp_path / "r.html"
    assert runner.invoke(app, ["report", str(flight_file), str(other), "-o", str(out)]).exit_code == 0
    host = tmp_path / "host.html"
    host.write_text(PROBE.format(name=out.name, w=390))
    flags = ["--headless", "--no-sandbox", "--disable-gpu", "--no-first-run", f"--user-data-dir={tmp_path / 'u'}",
             "--allow-file-access-from-files", "--virtual-time-budget=5000"]
    text = subprocess.run([CHROMIUM, *flags, "--dump-dom", host.as_uri()], capture_output=True, text=True,
                          timeout=120).stdout
    m = re.search(r'id="probe">W=(\d+) SMALL=([\d.]+) CUT=(\d+)', text)
    assert m, text[-400:]
    width, small, cut = int(m.group(1)), float(m.group(2)), int(m.group(3))
    assert width <= 390 and cut == 0  # nothing wider than the phone; wide tables scroll in their box
    assert small >= 8.0  # plot text at least 8 CSS px high on the phone (common practice: 9-12 px legible)


def test_report_words_signs_and_labels(flight_file, tmp_path):
    rec = json.loads(flight_file.read_text())
    rec["baseline"]["drag_coefficient"] = -0.12
    p = tmp_path / "neg.json"
    p.write_text(json.dumps(rec))
    out = tmp_path / "r.html"
    assert runner.invoke(app, ["report", str(p), "-o", str(out)]).exit_code == 0
    page = out.read_text()
    visible = re.sub(r"<svg.*?</svg>", "", page, flags=re.S)
    assert "negative drag coefficient (-0.120)" in visible
    assert rec["model"]["lift_model"] not in visible  # the model's id (sawicki2003) is shown as words
    assert "Sawicki, Hubbard &amp; Stronge (2003)" in visible
    assert "measured" in visible and "Left is positive everywhere" in visible


def test_simulated_flight_is_not_called_measured(tmp_path):
    f = tmp_path / "sim.json"
    assert runner.invoke(app, ["simulate", "--ball", "baseball", "--position", "0,0,1.8", "--speed", "40",
                               "--elevation", "-1", "--spin-rpm", "2200", "--spin-axis", "0,-1,0", "--target-x", "17",
                               "-o", str(f)]).exit_code == 0
    out = tmp_path / "r.html"
    assert runner.invoke(app, ["report", str(f), "-o", str(out)]).exit_code == 0
    page = out.read_text()
    assert "measured" not in page.replace("not measured", "")
    assert "predicted" in page


def test_many_flights_page_has_a_header_and_links(flight_file, tmp_path):
    out = tmp_path / "r.html"
    assert runner.invoke(app, ["report", str(flight_file), str(flight_file), "-o", str(out)]).exit_code == 0
    page = out.read_text()
    assert '<header class="page">' in page
    links = re.findall(r'<a href="#([^"]+)"', page)
    ids = set(re.findall(r'<section class="flight" id="([^"]+)"', page))
    assert len(ids) == 2 and set(links) == ids  # every flight linked, every link lands on a flight


def test_target_plane_plot_counts_left_positive(flight_file):
    from balltraj.report import plots

    rec = json.loads(flight_file.read_text())
    svg = plots.target_plane(record_paths(rec), rec)
    # the horizontal axis runs from + (left) on the left to - (right) on the right, as the tables count
    ticks = [(float(x), float(v.replace("−", "-"))) for x, y, v in
             re.findall(r'text-anchor: middle" x="([\d.]+)" y="([\d.]+)"[^>]*>(−?\d+(?:\.\d+)?)</text>', svg)]
    assert len(ticks) >= 3 and "left (+)" in svg
    xs, vals = zip(*sorted(ticks))
    assert all(b < a for a, b in zip(vals, vals[1:]))  # values fall from left to right
    # and the measured crossing (left of the reference when the deflection is + left) is drawn left of it
    assert rec["deflection"]["horizontal_m"] != 0


def test_one_page_text_stays_on_the_page_and_above_the_footer(flight_file):
    import matplotlib.pyplot as plt

    from balltraj.report.page import FOOTER_TOP, page_figure

    rec = json.loads(flight_file.read_text())
    rec["warnings"] = ["a long warning that a coach has to read in full, " * 6] * 8
    fig = page_figure(rec, "a flight with a rather long title " * 3, "imperial")
    fig.canvas.draw()
    r = fig.canvas.get_renderer()
    W, H = fig.bbox.width, fig.bbox.height
    whole = fig.get_tightbbox(r).transformed(fig.dpi_scale_trans)  # every drawn artist, in pixels
    assert whole.x0 >= -0.5 and whole.y0 >= -0.5 and whole.x1 <= W + 0.5 and whole.y1 <= H + 0.5
    above = [t.get_window_extent(r) for t in fig.texts if t.get_gid() != "footer"]
    above += [ax.get_tightbbox(r) for ax in fig.axes]
    assert min(b.y0 for b in above) >= FOOTER_TOP * H - 0.5  # nothing runs into the cautions
    plt.close(fig)
