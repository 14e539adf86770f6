"""Shared fixtures for the outside-reference checks: find and run `glowsim lines --json`, and collect the
measured differences into one table printed at the end of the run."""

from __future__ import annotations

import json
import os
import pathlib
import subprocess

import pytest

REPO = pathlib.Path(__file__).resolve().parents[2]

from figures import FIGURES

def _glowsim_path() -> pathlib.Path:
    env = os.environ.get("GLOWSIM")
    if env:
        return pathlib.Path(env)
    target = os.environ.get("CARGO_TARGET_DIR")
    base = pathlib.Path(target) if target else REPO / "target"
    return base / "debug" / "glowsim"


@pytest.fixture(scope="session")
def glowsim() -> pathlib.Path:
    path = _glowsim_path()
    if not path.exists():
        pytest.fail(f"glowsim binary not found at {path}: build it (cargo build -p glowcheck-sim) or set GLOWSIM")
    return path


def run_glowsim(path: pathlib.Path, args: list[str]) -> subprocess.CompletedProcess:
    return subprocess.run([str(path), *args], capture_output=True, text=True, timeout=120)


@pytest.fixture(scope="session")
def lines(glowsim):
    """lines(nucleus, lower, upper, *extra) -> parsed `glowsim lines --json` array. `upper` may be "A-B"."""

    cache: dict = {}

    def call(nucleus: str, lower: int, upper, *extra: str) -> list[dict]:
        args = ["lines", "--nucleus", nucleus, "--lower", str(lower), "--upper", str(upper), "--json", *extra]
        key = tuple(args)
        if key not in cache:
            done = run_glowsim(glowsim, args)
            if done.returncode != 0:
                pytest.fail(f"glowsim {' '.join(args)} exited {done.returncode}: {done.stderr.strip()}")
            cache[key] = json.loads(done.stdout)
        return cache[key]

    return call


def pytest_terminal_summary(terminalreporter):
    if not FIGURES:
        return
    tr = terminalreporter
    tr.section("measured differences (glowcheck - reference)")
    for check, source, worst, tol, unit in FIGURES:
        flag = "ok " if abs(worst) <= tol else "BAD"
        tr.write_line(f"{flag} {check:<48} max |diff| {abs(worst):10.5f} {unit} (bar {tol:g} {unit})  [{source}]")
