import csv
import json

from typer.testing import CliRunner

from balltraj.cli import app

runner = CliRunner()


def test_demo_recovers_the_sample_truth(tmp_path):
    out = tmp_path / "demo"
    r = runner.invoke(app, ["demo", "--out", str(out)])
    assert r.exit_code == 0, r.output
    assert (out / "report.html").exists()
    rows = list(csv.DictReader((out / "summary.csv").read_text().splitlines()))
    assert len(rows) == 3 and all(row["status"] == "ok" for row in rows)
    from pathlib import Path

    for row in rows:
        stem = Path(row["source"]).stem
        truth = json.loads(Path(row["source"]).with_suffix(".truth.json").read_text())["truth"]
        rec = json.loads((out / f"{stem}.json").read_text())
        for k in ("horizontal_m", "vertical_m"):
            err = abs(rec["deflection"][k] - truth["deflection"][k])
            assert err < max(0.02, 4 * rec["uncertainty"]["deflection"][k]), (stem, k, err)
        assert rec["fit"]["n_outliers"] >= 2  # the two mistracked frames
