"""drape as a new user gets it: pip-installed (not editable) into a fresh venv, run from a folder
far from the checkout. The bench verbs and the demo must find their example mappings inside
the installed package; a checkout-relative read would crash here and nowhere else.

Slow (a venv and a real install, about a minute): skip it with ``-m "not installed"``.
"""

import ast
import os
import shutil
import subprocess
import venv
from pathlib import Path

import pytest

from bridge.examples_data import NAMES, example_text
from tests.conftest import ROOT

pytestmark = pytest.mark.installed


def test_shipped_examples_are_the_checkouts_mappings():
    # The package copy must not drift from the files users read in mappings/.
    for name in NAMES:
        mine = ROOT / ("examples/service" if name == "chorus_cues.toml" else "mappings") / name
        assert example_text(name) == mine.read_text(encoding="utf-8"), f"bridge/examples_data/{name} differs from {mine}"
    assert {p.name for p in (ROOT / "mappings").glob("*.toml")} <= set(NAMES)


@pytest.fixture(scope="module")
def installed(tmp_path_factory):
    """A fresh venv with drape pip-installed from a clean copy of the checkout; returns its bin folder."""
    base = tmp_path_factory.mktemp("installed")
    src = base / "src"
    shutil.copytree(ROOT, src, ignore=shutil.ignore_patterns(
        ".git", ".venv", "build", "dist", "*.egg-info", "__pycache__", ".pytest_cache", ".hypothesis", "tests"))
    venv.create(base / "venv", with_pip=True)
    bin_dir = base / "venv" / ("Scripts" if os.name == "nt" else "bin")
    done = subprocess.run([str(bin_dir / "python"), "-m", "pip", "install", "--quiet", str(src)],
                          capture_output=True, text=True, timeout=600)
    assert done.returncode == 0, done.stderr[-3000:]
    shutil.rmtree(src)  # nothing of the checkout is left to lean on
    return bin_dir


def run_installed(bin_dir, folder, *args, timeout=300):
    env = {k: v for k, v in os.environ.items() if k not in ("PYTHONPATH", "VIRTUAL_ENV")}
    env["PATH"] = f"{bin_dir}{os.pathsep}{env.get('PATH', '')}"
    return subprocess.run([str(bin_dir / "drape"), *args], cwd=folder, capture_output=True, text=True,
                          timeout=timeout, env=env)


def test_installed_package_is_the_one_run(installed, tmp_path):
    out = subprocess.run([str(installed / "python"), "-c",
                          "import bridge, importlib.metadata as m; print(bridge.__file__); "
                          "print(m.distribution('drape-bridge').requires)"],
                         cwd=tmp_path, capture_output=True, text=True, timeout=60,
                         env={k: v for k, v in os.environ.items() if k != "PYTHONPATH"})
    where, requires = out.stdout.splitlines()
    assert Path(where).is_relative_to(installed.parent), where
    # Runtime needs stay the light five (anything more is an extra): the project's rule.
    core = {r.split(">")[0].split("=")[0].strip() for r in ast.literal_eval(requires) if "extra ==" not in r}
    assert core == {"numpy", "scipy", "python-osc", "mido", "pyserial"}, core


def test_bench_fuzz_from_a_scratch_folder(installed, tmp_path):
    done = run_installed(installed, tmp_path, "bench", "--fuzz", "50", "--fuzz-target", "mapping",
                         "--fuzz-target", "text")
    assert done.returncode == 0, done.stdout + done.stderr
    assert "Traceback" not in done.stderr
    assert "mapping" in done.stdout


def test_demo_from_a_scratch_folder(installed, tmp_path):
    done = run_installed(installed, tmp_path, "demo", "--for", "20", "--fast")
    assert done.returncode == 0, done.stdout + done.stderr
    assert "Traceback" not in done.stderr
    assert "demo.toml" in done.stdout and "stopped" in done.stdout


def test_soak_makes_its_output_folder(installed, tmp_path, second_model_file):
    out = tmp_path / "not" / "yet"
    done = run_installed(installed, tmp_path, "bench", "--soak", "0.01", "--soak-model", str(second_model_file),
                         "--soak-out", str(out))
    assert "Traceback" not in done.stderr, done.stderr
    assert done.returncode in (0, 1), done.stdout + done.stderr  # 1 means live and replay differ: a finding, not a crash
    assert (out / "soak-take.csv").is_file()


def test_bench_live_from_a_scratch_folder(installed, tmp_path):
    done = run_installed(installed, tmp_path, "bench", "--live", "--live-s", "5")
    assert done.returncode == 0 and "Traceback" not in done.stderr, done.stdout + done.stderr
    assert "live through a pty" in done.stdout
