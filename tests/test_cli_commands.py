"""The command line: output of check / prepare / demo, and the one-line error texts."""

from __future__ import annotations

import re

import pyarrow.parquet as pq
import pytest
from test_prepare_support import project, toml_text, write_log

from retain import cli

S = ("search", "north", "standard")
LOG = [("a", "2024-01-01", "signup", None, "Seedling", "10", *S),
       ("a", "2024-01-31", "cancel"),
       ("b", "2024-01-05", "signup", None, "Bloom", "20", *S),
       ("b", "2024-01-06", "teleport"), ("b", "2024-01-07", "teleport"),
       ("b", "2024-01-08", "warp")]


def test_check_prints_the_reconciliation_and_every_unknown_event(tmp_path, capsys):
    # half the rows are unknown events: allowed here, so check lists them and passes
    project(tmp_path, LOG, extra="[check]\nmax_unknown_event_share = 0.5\n")
    assert cli.main(["check", str(tmp_path / "retain.toml")]) == 0
    out, err = capsys.readouterr()
    # the log as the project file names it (relative to its folder)
    assert "Reconciliation of events.csv\n" in out
    assert re.search(r"^  rows in +6$", out, re.M)
    assert re.search(r"^  quarantined: unknown event +3$", out, re.M)
    assert re.search(r"^  used +3$", out, re.M)
    assert ("Unknown event values (map them in [events] map or list them in [events] ignore):\n"
            "  'teleport': 2 rows\n  'warp': 1 rows\n") in out
    assert "Start-stop table: 2 rows, 2 customers, 2 spells, 1 churns (voluntary 1)" in out
    # progress: step name, rows, seconds
    assert "  normalise" in err and " rows " in err and err.rstrip().endswith(" s")


def test_prepare_writes_the_tables(tmp_path, capsys):
    project(tmp_path, LOG)
    assert cli.main(["prepare", str(tmp_path / "retain.toml"), "--out", str(tmp_path / "o"),
                     "--quiet"]) == 0
    out, err = capsys.readouterr()
    assert err == ""
    assert f"wrote start_stop: {tmp_path / 'o' / 'start_stop.parquet'}" in out
    assert pq.read_table(tmp_path / "o" / "start_stop.parquet").num_rows == 2
    for name in ("quarantine.parquet", "quarantine.csv", "reconciliation.csv",
                 "reconciliation.json"):
        assert (tmp_path / "o" / name).is_file()


def test_prepare_defaults_to_the_output_dir_of_the_config(tmp_path, capsys):
    project(tmp_path, LOG)
    assert cli.main(["prepare", str(tmp_path / "retain.toml"), "--quiet"]) == 0
    assert (tmp_path / "out" / "start_stop.parquet").is_file()


def test_demo_prepares_the_shipped_demo(tmp_path, capsys):
    assert cli.main(["demo", "--out", str(tmp_path / "demo"), "--quiet"]) == 0
    out, _ = capsys.readouterr()
    assert "quillfern_events.csv.gz" in out
    table = pq.read_table(tmp_path / "demo" / "start_stop.parquet")
    assert table.num_rows > 10_000
    assert {"plan", "price_ratio", "in_recovery", "paused", "prior_spells", "cohort", "arm"} \
        <= set(table.column_names)


def error_line(capsys, argv):
    assert cli.main(argv) == cli.EXIT_ERROR
    out, err = capsys.readouterr()
    assert err.count("\n") == 1, err  # exactly one line
    return err.rstrip("\n")


def test_error_missing_config(tmp_path, capsys):
    assert error_line(capsys, ["check", str(tmp_path / "x.toml"), "--quiet"]) == (
        f"retain: {tmp_path / 'x.toml'}: file not found -- give the path of your retain.toml")


def test_error_unknown_key(tmp_path, capsys):
    write_log(tmp_path / "events.csv", LOG)
    (tmp_path / "retain.toml").write_text(toml_text().replace("threads = 1", "thread = 1"),
                                          encoding="utf-8")
    assert error_line(capsys, ["check", str(tmp_path / "retain.toml")]) == (
        f"retain: {tmp_path / 'retain.toml'}: [engine]: unknown key 'thread' -- allowed keys: "
        "memory_limit, threads, temp_directory")


def test_error_missing_column(tmp_path, capsys):
    write_log(tmp_path / "events.csv", [("a", "2024-01-01", "signup")],
              header=("account", "when", "kind", "cancel_reason", "plan", "monthly_price",
                      "channel", "region", "arm"))
    (tmp_path / "retain.toml").write_text(toml_text(), encoding="utf-8")
    assert error_line(capsys, ["prepare", str(tmp_path / "retain.toml"), "--quiet"]) == (
        f"retain: {tmp_path / 'events.csv'}: has no column 'occurred_at' (named by [columns] "
        f"event_time in {tmp_path / 'retain.toml'}) -- columns found: account, when, kind, "
        "cancel_reason, plan, monthly_price, channel, region, arm")


def test_error_strict_unknown_events(tmp_path, capsys):
    project(tmp_path, LOG, strict=True)
    assert error_line(capsys, ["check", str(tmp_path / "retain.toml"), "--quiet"]) == (
        f"retain: {tmp_path / 'events.csv'} column 'kind': unknown event values: 'teleport' "
        "(2 rows), 'warp' (1 rows) -- map them in [events] map or list them in [events] ignore "
        f"in {tmp_path / 'retain.toml'}")


def test_error_unreadable_source(tmp_path, capsys):
    project(tmp_path, LOG)
    (tmp_path / "events.csv").write_bytes(b"\x00\xff\xfe garbage")
    line = error_line(capsys, ["check", str(tmp_path / "retain.toml"), "--quiet"])
    assert line.startswith(f"retain: {tmp_path / 'events.csv'}: cannot be read as csv (")
    assert line.endswith(") -- check the file and [source] in retain.toml")


def test_debug_shows_the_traceback(tmp_path, capsys):
    assert cli.main(["check", str(tmp_path / "x.toml"), "--debug"]) == cli.EXIT_ERROR
    _, err = capsys.readouterr()
    assert "Traceback (most recent call last)" in err and "ConfigError" in err
    assert err.rstrip().endswith("file not found -- give the path of your retain.toml")


def test_an_unexpected_failure_is_still_one_line(capsys):
    def boom(args):
        raise ValueError("odd\nsecond line")

    cli.register("boom", "raises", lambda p: None, boom)
    try:
        assert error_line(capsys, ["boom"]) == (
            "retain: internal error (ValueError: odd) -- this is a bug in retain; rerun with "
            "--debug and report the traceback")
    finally:
        del cli.COMMANDS["boom"]


def test_commands_are_registered_in_one_table():
    assert {"check", "prepare", "demo"} <= set(cli.COMMANDS)
    with pytest.raises(SystemExit) as exc:
        cli.main([])
    assert exc.value.code == 2
