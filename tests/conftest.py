"""Shared test set-up: seeded hypothesis profile, no colour; the helpers in tests/ (synth.py,
scene_realism.py, surface_render.py) importable from every test folder."""
import sys
from pathlib import Path

import numpy as np
import pytest
from hypothesis import HealthCheck, settings

sys.path.insert(0, str(Path(__file__).resolve().parent))

settings.register_profile("ci", derandomize=True, deadline=None, max_examples=40,
                          suppress_health_check=[HealthCheck.too_slow])
settings.load_profile("ci")


@pytest.fixture
def rng():
    return np.random.default_rng(20261201)


@pytest.fixture(autouse=True)
def _no_color(monkeypatch):
    monkeypatch.setenv("NO_COLOR", "1")
    monkeypatch.setenv("TERM", "dumb")

# benchmarks run by hand (python tests/benchmarks/bench_*.py); the doctest collector must not import them
collect_ignore = ["benchmarks"]
