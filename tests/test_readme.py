"""Every `jointwise ...` command and the Python example in README.md run as written."""
import os
import re
import shlex
import subprocess
import sys

import pytest

ROOT = os.path.dirname(os.path.dirname(os.path.abspath(__file__)))
README = open(os.path.join(ROOT, "README.md"), encoding="utf-8").read()
BLOCKS = re.findall(r"```(\w+)\n(.*?)```", README, flags=re.S)
COMMANDS = [line.strip() for lang, body in BLOCKS if lang == "sh"
            for line in body.splitlines() if line.strip().startswith("jointwise ")]
JOINTWISE = os.path.join(os.path.dirname(sys.executable), "jointwise")


def test_readme_has_the_two_setup_commands_first():
    sh = [body.strip() for lang, body in BLOCKS if lang == "sh"]
    assert sh[0] == "sh dev/demo.sh"
    assert sh[1] == "sh dev/test.sh"


@pytest.mark.parametrize("command", COMMANDS)
def test_readme_command_runs(command, tmp_path):
    args = shlex.split(command)
    args = [JOINTWISE] + [os.path.join(ROOT, a) if a.startswith("blend_samples/") else a for a in args[1:]]
    r = subprocess.run(args, cwd=tmp_path, capture_output=True, text=True, timeout=300)
    assert r.returncode == 0, (command, r.stderr)
    assert "Traceback" not in r.stderr
    if "--out" in args:
        out = tmp_path / args[args.index("--out") + 1]
        assert out.stat().st_size > 0


def test_readme_python_example_runs():
    code = next(body for lang, body in BLOCKS if lang == "python")
    r = subprocess.run([sys.executable, "-c", code], cwd=ROOT, capture_output=True, text=True, timeout=300)
    assert r.returncode == 0, r.stderr


def test_readme_file_reference_parses_and_names_every_key():
    import tomllib

    from jointwise import spec
    block = next(body for lang, body in BLOCKS if lang == "toml")
    tomllib.loads(block)  # the reference itself is valid TOML
    for key in (spec.TOP_KEYS + spec.MECHANISM_KEYS + spec.LINK_KEYS + spec.JOINT_KEYS + spec.COUPLING_KEYS):
        assert re.search(rf"\b{key}\b", block), f"README file reference does not mention {key!r}"
    for mtype, keys in spec.MEASURE_TYPES.items():
        assert mtype in block
        for key in keys:
            assert re.search(rf"\b{key}\b", block), key
