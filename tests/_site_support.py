"""Shared helpers for the site tests: a small start-stop table and a browser.

The table is invented (the demo business's spirit, a few hundred customers) and
only feeds the builder; model correctness is checked in the models' own tests.
"""

from __future__ import annotations

from pathlib import Path

import numpy as np
import pandas as pd
import pytest

from retain.data.table import StartStop
from retain.publish.pages import STRICT_ENV

CHROMIUM = "/usr/bin/chromium"
CHROMIUM_ARGS = ["--no-sandbox", "--disable-gpu", "--disable-background-networking",
                 "--disable-component-update", "--disable-sync", "--no-first-run",
                 "--disable-quic"]
EVIL = "<script>alert(1)</script>"


@pytest.fixture(scope="module", autouse=True)
def strict_pages():
    """Imported by a test module: there, an exception inside a page builder raises instead
    of becoming a could-not-be-assembled page, so a broken page fails its test."""
    with pytest.MonkeyPatch.context() as patch:
        patch.setenv(STRICT_ENV, "1")
        yield


def small_table(n: int = 400, seed: int = 3, evil: bool = False) -> StartStop:
    """Exponential lifetimes by plan, censored at 2026-11-30, signups over 2024-2025."""
    rng = np.random.default_rng(seed)
    plans = np.array(["Seedling", "Orchard", EVIL if evil else "Grove"], dtype=object)
    plan = plans[rng.integers(0, 3, n)]
    channel = np.array(["web", "partner"], dtype=object)[rng.integers(0, 2, n)]
    rate = np.where(plan == "Seedling", 1 / 300, np.where(plan == "Orchard", 1 / 500, 1 / 800))
    life = rng.exponential(1 / rate)
    start_date = np.datetime64("2024-01-01") + rng.integers(0, 700, n).astype("timedelta64[D]")
    room = (np.datetime64("2026-11-30") - start_date).astype(float)
    churned = (life <= room).astype(int)
    stop = np.maximum(np.ceil(np.minimum(life, room)), 0.5)
    cause = np.where(churned == 1, np.where(rng.random(n) < 0.7, "voluntary", "involuntary"), "")
    ids = np.array([f"c{i:04d}" for i in range(n)], dtype=object)
    if evil:
        ids[0] = EVIL
    frame = pd.DataFrame({
        "customer_id": ids, "spell": 1, "start": 0.0, "stop": stop, "churned": churned,
        "cause": cause, "weight": 1.0, "start_date": start_date,
        "cohort": pd.Series(start_date.astype("datetime64[M]").astype(str)).to_numpy(),
        "plan": plan, "channel": channel,
        "price": np.where(plan == "Seedling", 20.0, 35.0),
    })
    return StartStop.from_frame(frame)


def tree_bytes(root: Path) -> dict[str, bytes]:
    """Every file under ``root`` (relative path -> bytes)."""
    return {str(p.relative_to(root)): p.read_bytes() for p in sorted(root.rglob("*"))
            if p.is_file()}
