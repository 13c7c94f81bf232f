"""``jointwise sweep`` command line: header, shapes, exit codes, atomic writes, plot."""
import csv
import io
import json
import os
import sys

import numpy as np
import pytest

sys.path.insert(0, os.path.dirname(__file__))
from sweep_fixtures import fourbar_toml  # noqa: E402

from jointwise import cli  # noqa: E402

MEAS = '''
[measures.tip]
type = "point"
link = "coupler"
at = [40, 60, 0]
[measures.ratio]
type = "rate"
of = "rocker"
per = "crank"
'''


@pytest.fixture
def treadle(tmp_path):
    f = tmp_path / "treadle.toml"
    f.write_text(fourbar_toml(measures=MEAS))
    return f


def run(args, capsys):
    try:
        code = cli.main([str(a) for a in args])
    except SystemExit as exc:  # argparse errors
        code = exc.code
    out = capsys.readouterr()
    return code, out.out, out.err


def test_csv_header_and_rows(treadle, capsys):
    code, out, err = run(["sweep", treadle, "--drive", "crank", "--from", 0, "--to", 360, "--steps", 13], capsys)
    assert code == 0, err
    rows = list(csv.reader(io.StringIO(out)))
    assert rows[0] == ["step", "crank", "crank", "elbow", "rocker", "wrist", "tip.x", "tip.y", "tip.z",
                       "ratio", "converged", "singular"]
    assert len(rows) == 14
    assert [r[0] for r in rows[1:]] == [str(i) for i in range(13)]
    assert float(rows[1][1]) == 0.0 and float(rows[-1][1]) == 360.0
    assert all(np.isfinite(float(x)) for r in rows[1:] for x in r)


def test_json_shape(treadle, capsys):
    code, out, err = run(["sweep", treadle, "--drive", "crank", "--from", 0, "--to", 90, "--steps", 4,
                          "--format", "json"], capsys)
    assert code == 0, err
    doc = json.loads(out)
    assert doc["drive"] == "crank" and len(doc["poses"]) == 4
    p = doc["poses"][0]
    assert set(p) >= {"converged", "residual", "singular", "joints", "links", "measures"}
    assert np.array(p["links"]["rocker"]).shape == (4, 4)
    assert len(p["measures"]["tip"]) == 3 and isinstance(p["measures"]["ratio"], float)


def test_exit_3_when_steps_fail_table_still_written(treadle, tmp_path, capsys):
    out_path = tmp_path / "rocker.csv"
    code, out, err = run(["sweep", treadle, "--drive", "rocker", "--from", 100, "--to", 160, "--steps", 31,
                          "--out", out_path], capsys)
    assert code == 3
    assert "did not converge" in err
    rows = list(csv.DictReader(open(out_path)))
    assert len(rows) == 31
    assert rows[0]["converged"] == "1" and rows[-1]["converged"] == "0"
    assert all("nan" not in v.lower() for r in rows for v in r.values())
    assert not [p for p in os.listdir(tmp_path) if ".tmp" in p]


@pytest.mark.parametrize("args, word", [
    (["--drive", "nosuch", "--from", 0, "--to", 1, "--steps", 3], "nosuch"),
    (["--drive", "crank", "--from", 0, "--to", 1, "--steps", 1], "steps"),
    (["--drive", "crank", "--from", 0, "--to", "x", "--steps", 3], "number"),
    (["--drive", "crank", "--from", 0, "--to", 1, "--steps", 3, "--set", "crank=3"], "drive"),
    (["--drive", "crank", "--from", 0, "--to", 1, "--steps", 3, "--set", "bogus=3"], "bogus"),
])
def test_bad_arguments_exit_2_no_output(treadle, tmp_path, capsys, args, word):
    out_path = tmp_path / "out.csv"
    out_path.write_text("old")
    code, out, err = run(["sweep", treadle] + args + ["--out", out_path], capsys)
    assert code == 2
    assert word in err and "Traceback" not in err
    assert out_path.read_text() == "old"


def test_bad_file_exit_2(tmp_path, capsys):
    f = tmp_path / "broken.toml"
    f.write_text("[mechanism\n")
    code, out, err = run(["sweep", f, "--drive", "crank", "--from", 0, "--to", 1, "--steps", 3], capsys)
    assert code == 2 and "broken.toml" in err


def test_plot_written(treadle, tmp_path, capsys):
    pytest.importorskip("matplotlib")
    png = tmp_path / "treadle.png"
    code, out, err = run(["sweep", treadle, "--drive", "rocker", "--from", 90, "--to", 150, "--steps", 61,
                          "--plot", png, "--out", tmp_path / "t.csv"], capsys)
    assert code == 3
    assert png.read_bytes()[:8] == b"\x89PNG\r\n\x1a\n"
    assert not [p for p in os.listdir(tmp_path) if ".tmp" in p]


def test_plot_without_matplotlib_says_how_to_install(treadle, tmp_path, capsys, monkeypatch):
    import builtins
    real = builtins.__import__

    def fake(name, *a, **k):
        if name == "matplotlib" or name.startswith("matplotlib."):
            raise ImportError("no matplotlib")
        return real(name, *a, **k)
    monkeypatch.setattr(builtins, "__import__", fake)
    out_path = tmp_path / "t.csv"
    code, out, err = run(["sweep", treadle, "--drive", "crank", "--from", 0, "--to", 10, "--steps", 3,
                          "--plot", tmp_path / "p.png", "--out", out_path], capsys)
    assert code == 2
    assert "pip install 'jointwise[plot]'" in err
    assert not out_path.exists() and not (tmp_path / "p.png").exists()
