"""Issue 14, items 4, 5, 7 and 9: bounded inputs, no tracebacks, outputs written whole or
not at all, exact numbers in written files, ``check`` notes, signed ``pose`` text, ``--version``.
"""
from __future__ import annotations

import contextlib
import csv
import io
import json
import math
import os
import re
import tomllib
from pathlib import Path

import numpy as np
import pytest

import jointwise
from jointwise import cli, report
from jointwise.spec import LIMITS
from mechanisms import no_traceback, run_cli

ROOT = Path(__file__).resolve().parent.parent
SAMPLES = ROOT / "blend_samples"
ROCKER = SAMPLES / "wagtail_rocker.toml"
PUMP = SAMPLES / "dipper_pump.toml"


def run_in(*argv):
    """``jointwise ARGV`` in-process: (exit code, stdout, stderr); any exception fails."""
    out, err = io.StringIO(), io.StringIO()
    with contextlib.redirect_stdout(out), contextlib.redirect_stderr(err):
        try:
            code = cli.main([str(a) for a in argv])
        except SystemExit as exc:
            code = exc.code
    return code, out.getvalue(), err.getvalue()


def unwritable_folder(tmp_path):
    """A folder this process cannot create files in (root ignores permission bits: /sys)."""
    if os.geteuid() == 0:
        return Path("/sys")
    ro = tmp_path / "ro"
    ro.mkdir()
    ro.chmod(0o555)
    return ro


# -- item 4: bounded resources ---------------------------------------------------------------

def test_device_file_is_read_with_a_cap():
    r = run_cli("check", "/dev/zero")
    no_traceback(r)
    assert r.code == 2 and "limit of 16 MB" in r.err and "zero" in r.err


def test_file_just_over_the_cap_is_refused_and_the_cap_is_16_mib(tmp_path):
    assert LIMITS["file_bytes"] == 16 * 1024 * 1024
    p = tmp_path / "big.toml"
    p.write_bytes(b"#" * (LIMITS["file_bytes"] + 1))
    code, _, err = run_in("check", p)
    assert code == 2 and "big.toml" in err and "16 MB" in err


@pytest.mark.parametrize("fmt", ["json", "toml"])
def test_nesting_a_thousand_deep_is_refused_by_the_limit(tmp_path, fmt):
    deep = "[" * 1000 + "]" * 1000
    p = tmp_path / f"deep.{fmt}"
    p.write_text(deep if fmt == "json" else f"x = {deep}\n")
    code, _, err = run_in("check", p)
    assert code == 2 and "nested 1000 levels deep" in err and "limit of 64" in err


def test_nesting_at_the_limit_still_parses_to_the_usual_messages(tmp_path):
    # 64 levels pass the nesting check and reach the ordinary key check
    p = tmp_path / "ok.toml"
    p.write_text("x = " + "[" * 64 + "]" * 64 + "\n")
    code, _, err = run_in("check", p)
    assert code == 2 and "x: unknown key" in err


def test_dotted_keys_nest_too(tmp_path):
    p = tmp_path / "dots.toml"
    p.write_text("[" + ".".join(["a"] * 70) + "]\nx = 1\n")
    code, _, err = run_in("check", p)
    assert code == 2 and "limit of 64" in err


def test_long_list_is_refused_naming_its_key(tmp_path):
    data = tomllib.loads(ROCKER.read_text())
    text = ROCKER.read_text().replace("home = 60", "home = [" + ", ".join(["0"] * 100_001) + "]")
    p = tmp_path / "long.toml"
    p.write_text(text)
    code, _, err = run_in("check", p)
    assert code == 2 and "joints.crank_pin.home" in err and "100001 entries" in err and "100000" in err
    assert data  # the sample itself is fine


@pytest.mark.parametrize("value", ["1e200", "-1e13", "100000000000000000000000000000000000000"])
def test_coordinate_beyond_the_magnitude_limit_never_reaches_the_solver(tmp_path, value):
    text = ROCKER.read_text().replace("point = [60, 0, 0]", f"point = [{value}, 0, 0]")
    p = tmp_path / "far.toml"
    p.write_text(text)
    for cmd in (["check"], ["pose"], ["sweep", "--drive", "crank_pin", "--from", "0", "--to", "9", "--steps", "3"]):
        code, _, err = run_in(cmd[0], p, *cmd[1:])
        assert code == 2, err
        assert "far.toml: joints.rocker_pivot.point[0]" in err and "limit of 1e+12" in err


def test_coordinate_at_the_limit_is_accepted(tmp_path):
    text = ROCKER.read_text().replace('[measures.sign_hook]\ntype = "point"\nlink = "coupler"\n'
                                      'at = [25.810947420444, 53.027845440269, 0]',
                                      '[measures.sign_hook]\ntype = "point"\nlink = "coupler"\n'
                                      'at = [1e12, 0, 0]')
    p = tmp_path / "edge.toml"
    p.write_text(text)
    code, _, err = run_in("check", p)
    assert code == 0, err


@pytest.mark.parametrize("steps,ok", [("1e20", False), ("1000000000", False), ("100000001", False),
                                      ("1e2", True), ("2.5", False), ("inf", False)])
def test_steps_limit(steps, ok):
    code, out, err = run_in("sweep", ROCKER, "--drive", "crank_pin", "--from", "0", "--to", "9",
                            "--steps", steps)
    if ok:
        assert code == 0 and len(out.splitlines()) == 101
    else:
        assert code == 2
        if steps[0] == "1" and "." not in steps:
            assert "limit of 100000000 steps" in err


def test_angle_span_limit_in_turns():
    code, _, err = run_in("sweep", ROCKER, "--drive", "crank_pin", "--from", "0", "--to", "1e9", "--steps", "3")
    assert code == 2 and "limit of 10000 turns" in err and "crank_pin" in err
    # exactly 10 000 turns is within the limit: not refused as input (two samples that far
    # apart are the solver's to flag, "too far to follow")
    code, out, err = run_in("sweep", ROCKER, "--drive", "crank_pin", "--from", "60", "--to", str(60 + 3_600_000),
                            "--steps", "2")
    assert code in (0, 3) and "limit of" not in err, err


def test_length_span_limit_in_mechanism_sizes():
    m = jointwise.load(PUMP)
    slide = next(c for c in m.coordinates if m.coordinate_kind(c) == "length")
    far = 1.01e6 * m.size
    code, _, err = run_in("sweep", PUMP, "--drive", slide, "--from", "0", "--to", repr(far), "--steps", "3")
    assert code == 2 and "limit of 1e+06 mechanism sizes" in err


# -- item 4: streaming sweeps ----------------------------------------------------------------

def test_chunk_values_equal_linspace_bit_for_bit():
    m = jointwise.load(ROCKER)
    for a, b, n in [(60.0, 420.0, 23), (0.1, -0.7, 11), (5.0, 5.0, 4)]:
        vals = np.concatenate([sw.values for _, sw in report.sweep_chunks(m, "crank_pin", a, b, n, chunk=4)])
        assert np.array_equal(vals, np.linspace(a, b, n))


def test_streamed_sweep_matches_the_one_piece_sweep(monkeypatch, tmp_path):
    whole = tmp_path / "whole.csv"
    code, _, err = run_in("sweep", ROCKER, "--drive", "crank_pin", "--from", "60", "--to", "420",
                          "--steps", "73", "--out", whole)
    assert code == 0, err
    monkeypatch.setattr(report, "SWEEP_CHUNK", 10)
    parts = tmp_path / "parts.csv"
    code, _, err = run_in("sweep", ROCKER, "--drive", "crank_pin", "--from", "60", "--to", "420",
                          "--steps", "73", "--out", parts)
    assert code == 0, err
    a = list(csv.reader(whole.open()))
    b = list(csv.reader(parts.open()))
    assert a[0] == b[0] and len(a) == len(b) == 74
    A = np.array(a[1:], float)
    B = np.array(b[1:], float)
    assert np.array_equal(A[:, :2], B[:, :2])          # step numbers and drive values exact
    assert np.allclose(A, B, rtol=0, atol=1e-7)        # solved values within the solver tolerance


def test_streamed_json_is_one_document(monkeypatch):
    monkeypatch.setattr(report, "SWEEP_CHUNK", 4)
    code, out, err = run_in("sweep", ROCKER, "--drive", "crank_pin", "--from", "60", "--to", "420",
                            "--steps", "10", "--format", "json")
    assert code == 0, err
    doc = json.loads(out)
    assert doc["drive"] == "crank_pin" and len(doc["poses"]) == 10
    assert [p["joints"]["crank_pin"] for p in doc["poses"]] == list(np.linspace(60, 420, 10))


# -- item 5: whole outputs or none -------------------------------------------------------------

def test_table_and_plot_are_written_together_or_not_at_all(tmp_path):
    pytest.importorskip("matplotlib")
    ro = unwritable_folder(tmp_path)
    ok = tmp_path / "ok.csv"
    before = sorted(os.listdir(tmp_path))
    code, _, err = run_in("sweep", ROCKER, "--drive", "crank_pin", "--from", "60", "--to", "420", "--steps", "5",
                          "--out", ok, "--plot", ro / "p.png")
    assert code == 2 and "--plot" in err and str(ro) in err
    assert sorted(os.listdir(tmp_path)) == before and not ok.exists()
    assert not (ro / "p.png").exists()
    # both writable: both written, no temporary files left
    code, _, err = run_in("sweep", ROCKER, "--drive", "crank_pin", "--from", "60", "--to", "420", "--steps", "5",
                          "--out", ok, "--plot", tmp_path / "p.png")
    assert code == 0, err
    assert sorted(os.listdir(tmp_path)) == sorted(before + ["ok.csv", "p.png"])
    assert (tmp_path / "p.png").read_bytes()[:8] == b"\x89PNG\r\n\x1a\n"
    assert oct(ok.stat().st_mode & 0o777) == oct(0o666 & ~_umask())


def _umask():
    m = os.umask(0)
    os.umask(m)
    return m


def test_sweep_with_unreachable_rows_is_written_and_exits_3(tmp_path):
    # the rocker of a crank-rocker swings through a limited arc: beyond it the rows are flagged
    out = tmp_path / "r.csv"
    code, _, err = run_in("sweep", ROCKER, "--drive", "rocker_pivot", "--from", "0", "--to", "170", "--steps", "35",
                          "--out", out)
    assert code == 3 and "did not converge" in err
    rows = list(csv.DictReader(out.open()))
    assert len(rows) == 35
    flags = [r["converged"] for r in rows]
    assert "0" in flags and "1" in flags
    assert all(math.isfinite(float(v)) for r in rows for k, v in r.items())
    assert [f for f in os.listdir(tmp_path)] == ["r.csv"]


def test_failure_inside_a_streamed_sweep_leaves_nothing(tmp_path, monkeypatch):
    # a failure after some rows were written: the temporary table goes, nothing is left
    calls = {"n": 0}
    real = report.sweep_chunks

    def failing(*a, **k):
        for item in real(*a, **k):
            calls["n"] += 1
            if calls["n"] == 2:
                raise MemoryError
            yield item
    monkeypatch.setattr(report, "sweep_chunks", failing)
    monkeypatch.setattr(report, "SWEEP_CHUNK", 5)
    out = tmp_path / "t.csv"
    code, _, err = run_in("sweep", ROCKER, "--drive", "crank_pin", "--from", "60", "--to", "420", "--steps", "20",
                          "--out", out)
    assert code == 2 and "out of memory" in err and "Traceback" not in err
    assert os.listdir(tmp_path) == []


@pytest.mark.parametrize("exc,code,words", [(np.linalg.LinAlgError("SVD did not converge"), 3, "numeric failure"),
                                            (MemoryError(), 2, "out of memory"),
                                            (RecursionError(), 2, "nested too deeply"),
                                            (KeyError("x"), 3, "internal error")])
def test_failures_deep_inside_become_messages(monkeypatch, exc, code, words):
    def boom(mech, args):
        raise exc
    monkeypatch.setitem(cli.COMMANDS, "check", boom)
    got, out, err = run_in("check", ROCKER)
    assert got == code and words in err and "wagtail_rocker.toml" in err and "Traceback" not in err


# -- item 9: check notes, pose text, version -------------------------------------------------------

@pytest.mark.parametrize("sample", sorted(p.name for p in SAMPLES.glob("*.toml")))
def test_every_shipped_sample_checks_without_problems(sample):
    code, out, err = run_in("check", SAMPLES / sample, "--format", "json")
    assert code == 0, err
    info = json.loads(out)
    assert info["problems"] == []
    assert isinstance(info["notes"], list) and all(isinstance(n, str) for n in info["notes"])
    if info["mobility"]["redundant"]:
        assert any("overconstrained as counted" in n for n in info["notes"])


def test_structure_is_still_a_problem(tmp_path):
    # a triangle of three revolutes is a structure (Kutzbach 3(3-1) - 2*3 = 0, Norton ch. 2)
    d = {"format": 1, "mechanism": {"ground": "a"}, "links": {"a": {}, "b": {}, "c": {}},
         "joints": {"j1": {"type": "revolute", "parent": "a", "child": "b", "point": [0, 0, 0], "axis": [0, 0, 1]},
                    "j2": {"type": "revolute", "parent": "b", "child": "c", "point": [1, 0, 0], "axis": [0, 0, 1]},
                    "j3": {"type": "revolute", "parent": "c", "child": "a", "point": [0, 1, 0], "axis": [0, 0, 1]}}}
    p = tmp_path / "tri.json"
    p.write_text(json.dumps(d))
    code, out, err = run_in("check", p, "--format", "json")
    assert code == 0, err
    assert any("cannot move" in x for x in json.loads(out)["problems"])


def test_pose_text_signed_with_units():
    # crank from home 60 to 25 deg: the crank link turns -35 deg about +z (its axis, [0, 0, 1])
    code, out, err = run_in("pose", ROCKER, "--set", "crank_pin=25")
    assert code == 0, err
    crank = next(line for line in out.splitlines() if line.strip().startswith("crank "))
    assert "turned -35 deg about [0, 0, 1]" in crank and "mm" in crank
    joint = next(line for line in out.splitlines() if line.strip().startswith("crank_pin"))
    assert re.search(r"\+25\.000000 deg$", joint)
    for line in out.splitlines()[2:]:
        if line.startswith("  ") and not line.startswith("  frame"):
            assert re.search(r"[+-]\d", line), line


def test_version_matches_the_package():
    code, out, _ = run_in("--version")
    assert code == 0 and out.strip() == f"jointwise {jointwise.__version__}"
    meta = tomllib.loads((ROOT / "pyproject.toml").read_text())["project"]["version"]
    assert jointwise.__version__ == meta


def test_device_or_link_as_out_is_written_in_place_never_replaced(tmp_path):
    import stat
    if stat.S_ISCHR(os.stat(os.devnull).st_mode):
        code, _, err = run_in("sweep", ROCKER, "--drive", "crank_pin", "--from", "60", "--to", "420",
                              "--steps", "3", "--out", os.devnull)
        assert code == 0, err
        assert stat.S_ISCHR(os.lstat(os.devnull).st_mode)  # still the device, not a file
    target = tmp_path / "real.csv"
    target.write_text("old\n")
    link = tmp_path / "link.csv"
    link.symlink_to(target)
    code, _, err = run_in("sweep", ROCKER, "--drive", "crank_pin", "--from", "60", "--to", "420",
                          "--steps", "3", "--out", link)
    assert code == 0, err
    assert link.is_symlink() and target.read_text().startswith("step,crank_pin")
    assert sorted(os.listdir(tmp_path)) == ["link.csv", "real.csv"]


@pytest.mark.parametrize("start", ["-1e1", "-10", "-1.5e1", "-.5e2"])
def test_negative_numbers_in_scientific_form_are_values(start):
    code, out, err = run_in("sweep", ROCKER, "--drive", "crank_pin", "--from", start, "--to", "0", "--steps", "2")
    assert code == 0, err
    assert float(out.splitlines()[1].split(",")[1]) == float(start)


def test_plot_to_a_link_is_refused_and_nothing_is_written(tmp_path):
    # a PNG cannot go to a device or through a link: refused before any work, the link
    # and its target untouched and no table written either (whole or nothing)
    target = tmp_path / "real.png"
    target.write_bytes(b"old")
    link = tmp_path / "link.png"
    link.symlink_to(target)
    code, _, err = run_in("sweep", ROCKER, "--drive", "crank_pin", "--from", "60", "--to", "420",
                          "--steps", "5", "--out", tmp_path / "t.csv", "--plot", link)
    assert code == 2 and "--plot" in err and "give a file name" in err
    assert link.is_symlink() and target.read_bytes() == b"old"
    assert sorted(os.listdir(tmp_path)) == ["link.png", "real.png"]
