"""Helpers for the preparation tests: write a small log and its retain.toml, prepare it.

(No tests here; the other test_prepare_*, test_sql_* and test_cli_* files import it.)
"""

from __future__ import annotations

import csv
from pathlib import Path
from typing import Any

from retain.data.config import Config, load_config
from retain.data.prepare import Prepared, prepare

HEADER = ("account", "occurred_at", "kind", "cancel_reason", "plan", "monthly_price",
          "channel", "region", "arm")

EVENT_MAP = ('{ signup = "start", reactivate = "start", plan_change = "update", '
             'price_change = "update", payment_failed = "payment_failed", '
             'payment_recovered = "payment_recovered", pause = "pause", resume = "resume", '
             'cancel = "end" }')

ATTRIBUTES = """
[attributes.plan]
kind = "categorical"
varies = true

[attributes.price]
column = "monthly_price"
kind = "numeric"
varies = true
ratio = true

[attributes.channel]
kind = "categorical"
varies = false

[attributes.region]
kind = "categorical"
varies = false

[attributes.arm]
kind = "categorical"
varies = false
"""


def toml_text(*, as_of: str = "2024-12-31", start: str | None = None, timezone: str = "UTC",
              strict: bool = False, reasons_strict: bool | None = None,
              reason_ignore: tuple[str, ...] = (), compress: bool = False,
              source: str = 'path = "events.csv"', attributes: str = ATTRIBUTES,
              extra: str = "") -> str:
    window = f'as_of = "{as_of}"\ntimezone = "{timezone}"\n'
    if start is not None:
        window += f'start = "{start}"\n'
    ignored = ", ".join(f'"{r}"' for r in reason_ignore)
    reasons = ('map = { too_expensive = "voluntary", not_using = "voluntary", '
               'card_declined = "involuntary" }\n'
               f"ignore = [{ignored}]\n")
    if reasons_strict is not None:
        reasons += f"strict = {str(reasons_strict).lower()}\n"
    return (f"[source]\n{source}\n\n"
            "[columns]\ncustomer_id = \"account\"\nevent_time = \"occurred_at\"\n"
            "event = \"kind\"\nreason = \"cancel_reason\"\n\n"
            f"[events]\nmap = {EVENT_MAP}\nignore = [\"email_opened\"]\n"
            f"strict = {str(strict).lower()}\n\n"
            f"[reasons]\n{reasons}\n"
            f"[window]\n{window}\n"
            f"{attributes}\n"
            f"[engine]\nmemory_limit = \"1GB\"\nthreads = 1\n\n"
            f"[output]\ndir = \"out\"\ncompress = {str(compress).lower()}\n{extra}")


def write_log(path: Path, rows: list[tuple[Any, ...]], header: tuple[str, ...] = HEADER) -> Path:
    """rows: tuples in HEADER order, short tuples padded with empty fields; None = empty."""
    with open(path, "w", newline="", encoding="utf-8") as fh:
        w = csv.writer(fh)
        w.writerow(header)
        for r in rows:
            r = tuple(r) + (None,) * (len(header) - len(r))
            w.writerow(["" if v is None else v for v in r])
    return path


def project(tmp_path: Path, rows: list[tuple[Any, ...]], **kw: Any) -> Config:
    write_log(tmp_path / "events.csv", rows)
    (tmp_path / "retain.toml").write_text(toml_text(**kw), encoding="utf-8")
    return load_config(tmp_path / "retain.toml")


def run(tmp_path: Path, rows: list[tuple[Any, ...]], **kw: Any) -> Prepared:
    return prepare(project(tmp_path, rows, **kw))


def rows_of(prepared: Prepared, cols: tuple[str, ...]) -> list[tuple[Any, ...]]:
    t = prepared.arrow
    data = [t.column(c).to_pylist() for c in cols]
    return [tuple(v) for v in zip(*data, strict=True)]


CORE = ("customer_id", "spell", "start", "stop", "churned", "cause")
