"""Shared fixtures: the shipped Quillfern demo log, prepared once per test session."""

from __future__ import annotations

import json
import os

import pytest

from retain.paths import DEMO_DIR

# every site a test builds (in this process or a `retain` subprocess) raises on a page
# builder's exception instead of shipping an error page: a renamed result attribute
# must fail the suite, not publish a broken page
os.environ.setdefault("RETAIN_STRICT_PAGES", "1")

DEMO_TOML = DEMO_DIR / "retain.toml"
DEMO_TRUTH = DEMO_DIR / "truth.json"


@pytest.fixture(scope="session")
def demo_prepared():
    """``prepare()`` of demo_data/retain.toml (skips when the demo is not generated)."""
    if not (DEMO_TOML.exists() and DEMO_TRUTH.exists()):
        pytest.skip("demo log or truth.json not generated yet")
    from retain.data.config import load_config
    from retain.data.prepare import prepare

    return prepare(load_config(DEMO_TOML))


@pytest.fixture(scope="session")
def demo_truth():
    """demo_data/truth.json: the generator's true parameters and reference values."""
    if not DEMO_TRUTH.exists():
        pytest.skip("truth.json not generated yet")
    return json.loads(DEMO_TRUTH.read_text())
