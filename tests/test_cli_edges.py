"""Command-line edge cases found in review: each bad input gets exit 2 or 3 and a clear message."""
import json
import os
import subprocess
import sys

import pytest

ROOT = os.path.dirname(os.path.dirname(os.path.abspath(__file__)))
ROCKER = os.path.join(ROOT, "blend_samples", "wagtail_rocker.toml")
JOINTWISE = os.path.join(os.path.dirname(sys.executable), "jointwise")


def run(*args, cwd=None):
    r = subprocess.run([JOINTWISE, *args], capture_output=True, text=True, timeout=120, cwd=cwd)
    assert "Traceback" not in r.stderr, r.stderr
    return r


def test_check_json_has_exactly_the_interface_keys():
    # issue 2 and 3 interfaces, plus issue 14's "notes": these keys, no others
    r = run("check", ROCKER, "--format", "json")
    assert r.returncode == 0
    assert set(json.loads(r.stdout)) == {"links", "joints", "coordinates", "loops", "driven", "problems",
                                         "notes", "mobility", "home_closure"}


def test_set_given_twice_is_refused():
    r = run("pose", ROCKER, "--set", "crank_pin=90", "--set", "crank_pin=95")
    assert r.returncode == 2 and "crank_pin" in r.stderr and "more than once" in r.stderr


def test_held_value_reads_back_exactly():
    r = run("pose", ROCKER, "--set", "crank_pin=95", "--format", "json")
    assert r.returncode == 0 and json.loads(r.stdout)["joints"]["crank_pin"] == 95.0
    r = run("sweep", ROCKER, "--drive", "crank_pin", "--from", "60", "--to", "70", "--steps", "3")
    rows = [line.split(",") for line in r.stdout.splitlines()]
    assert rows[1][1] == rows[1][2] == "60.0"


def test_plot_needs_a_png_name(tmp_path):
    r = run("sweep", ROCKER, "--drive", "crank_pin", "--from", "60", "--to", "70", "--steps", "3",
            "--out", str(tmp_path / "t.csv"), "--plot", str(tmp_path / "p.svg"))
    assert r.returncode == 2 and ".png" in r.stderr
    assert not os.listdir(tmp_path)  # nothing written


def test_unwritable_out_names_the_option():
    r = run("sweep", ROCKER, "--drive", "crank_pin", "--from", "60", "--to", "70", "--steps", "3",
            "--out", "/proc/jointwise-test.csv")
    assert r.returncode == 2 and "--out" in r.stderr and ".tmp-" not in r.stderr


def test_range_of_a_locked_drive_is_exit_3():
    # holding the rocker locks the crank of a four-bar: no interval to report
    r = run("range", ROCKER, "--drive", "crank_pin", "--set", "rocker_pivot=10")
    assert r.returncode == 3 and "cannot move" in r.stderr and "rocker_pivot" in r.stderr


def test_absurd_value_is_refused_quickly():
    r = run("pose", ROCKER, "--set", "crank_pin=1e300")
    assert r.returncode == 3 and "too far" in r.stderr


def test_two_links_on_one_object_is_refused(tmp_path):
    text = open(ROCKER, encoding="utf-8").read().replace('object = "rocker_arm"', 'object = "rocker_crank"')
    p = tmp_path / "twice.toml"
    p.write_text(text, encoding="utf-8")
    r = run("check", str(p))
    assert r.returncode == 2
    assert "twice.toml: links.rocker.object" in r.stderr and "rocker_crank" in r.stderr


@pytest.mark.parametrize("bad", ["nan", "inf"])
def test_sweep_message_shows_plain_numbers(bad):
    import numpy as np

    import jointwise
    m = jointwise.load(ROCKER)
    with pytest.raises(jointwise.SpecError) as e:
        m.sweep("crank_pin", [60, 70, float(bad)])
    assert "np.float64" not in str(e.value)
