"""Messages of the command line that name the real cause: output folders, a folder given
as the project file, a closed stdout, and which folders ``build --out`` accepts."""

from __future__ import annotations

import subprocess
import sys

import pyarrow.parquet as pq
from test_prepare_support import project

from retain import cli
from retain.publish.site import MARKER, TABLE_FILES

S = ("search", "north", "standard")
LOG = [("a", "2024-01-01", "signup", None, "Seedling", "10", *S),
       ("a", "2024-01-31", "cancel", "too_expensive"),
       ("b", "2024-01-05", "signup", None, "Bloom", "20", *S),
       ("c", "2024-02-05", "signup", None, "Bloom", "20", *S),
       ("c", "2024-05-05", "cancel", "card_declined")]


def one_error_line(capsys, argv) -> str:
    assert cli.main(argv) == cli.EXIT_ERROR
    out, err = capsys.readouterr()
    assert err.count("\n") == 1, err  # exactly one line
    assert "internal error" not in err and "Traceback" not in err
    return err.rstrip("\n")


def test_output_dir_that_is_a_file_names_the_key(tmp_path, capsys):
    project(tmp_path, LOG)
    (tmp_path / "out").write_text("not a folder")  # the project file says dir = "out"
    line = one_error_line(capsys, ["prepare", str(tmp_path / "retain.toml"), "--quiet"])
    assert line == (f"retain: {tmp_path / 'retain.toml'}: [output] dir: {tmp_path / 'out'} is a "
                    "file, not a folder -- set [output] dir to a folder, or give --out")


def test_output_dir_inside_a_file_and_build_default(tmp_path, capsys):
    project(tmp_path, LOG)
    (tmp_path / "out").write_text("not a folder")
    # build's default is [output] dir / site, which lies inside the file
    line = one_error_line(capsys, ["build", str(tmp_path / "retain.toml"), "--quiet"])
    assert line.startswith(f"retain: {tmp_path / 'retain.toml'}: [output] dir: "
                           f"{tmp_path / 'out' / 'site'} lies inside {tmp_path / 'out'}, which "
                           "is a file, not a folder")


def test_out_option_that_is_a_file(tmp_path, capsys):
    project(tmp_path, LOG)
    target = tmp_path / "tables.txt"
    target.write_text("x")
    line = one_error_line(capsys, ["prepare", str(tmp_path / "retain.toml"), "--out",
                                   str(target)])
    assert line == (f"retain: {target}: is a file, not a folder (given as --out) -- give a "
                    "folder for --out")
    assert target.read_text() == "x"


def test_a_folder_given_as_the_project_file(tmp_path, capsys):
    project(tmp_path, LOG)
    line = one_error_line(capsys, ["check", str(tmp_path)])
    assert line == (f"retain: {tmp_path}: is a folder, not a project file -- give "
                    f"{tmp_path / 'retain.toml'}")
    empty = tmp_path / "empty"
    empty.mkdir()
    line = one_error_line(capsys, ["prepare", str(empty)])
    assert line == (f"retain: {empty}: is a folder, not a project file -- give the path of the "
                    "project's retain.toml")


def test_build_accepts_the_folder_prepare_wrote_and_keeps_the_tables(tmp_path, capsys):
    project(tmp_path, LOG)
    toml, out = str(tmp_path / "retain.toml"), tmp_path / "both"
    assert cli.main(["prepare", toml, "--out", str(out), "--quiet"]) == 0
    tables = {p.name: p.read_bytes() for p in out.iterdir()}
    assert set(tables) <= TABLE_FILES and "start_stop.parquet" in tables
    capsys.readouterr()
    for _ in range(2):  # into the prepared folder, then over the site it wrote
        assert cli.main(["build", toml, "--out", str(out), "--quiet"]) == 0
        printed = capsys.readouterr().out.strip().splitlines()[-1]
        assert printed == str(out.resolve() / "index.html")
        assert (out / "index.html").is_file() and (out / MARKER).is_file()
        assert {name: (out / name).read_bytes() for name in tables} == tables
    assert pq.read_table(out / "start_stop.parquet").num_rows == 3
    assert sorted(p.name for p in tmp_path.iterdir() if p.name.startswith(".")) == []


def test_build_into_the_demo_layout_keeps_the_nested_site(tmp_path, capsys):
    """`demo --out X` writes the tables in X and the site in X/site: both are retain's."""
    project(tmp_path, LOG)
    toml, out = str(tmp_path / "retain.toml"), tmp_path / "x"
    assert cli.main(["prepare", toml, "--out", str(out), "--quiet"]) == 0
    assert cli.main(["build", toml, "--out", str(out / "site"), "--quiet"]) == 0
    nested = (out / "site" / "index.html").read_bytes()
    assert cli.main(["build", toml, "--out", str(out), "--quiet"]) == 0
    assert (out / "site" / "index.html").read_bytes() == nested
    assert (out / "index.html").is_file() and (out / "start_stop.parquet").is_file()


def test_build_refuses_a_foreign_folder_before_preparing(tmp_path, capsys):
    project(tmp_path, LOG)
    out = tmp_path / "mine"
    out.mkdir()
    (out / "notes.txt").write_text("keep me")
    (out / "start_stop.parquet").write_bytes(b"")  # a prepared table beside it does not help
    assert cli.main(["build", str(tmp_path / "retain.toml"), "--out", str(out)]) == cli.EXIT_ERROR
    _, err = capsys.readouterr()
    assert err == (f"retain: {out.resolve()}: the output folder is not empty and was not "
                   "written by retain (it holds notes.txt) -- choose an empty or new folder "
                   "for --out\n")  # one line, and no progress lines: nothing was prepared
    assert (out / "notes.txt").read_text() == "keep me"


def test_broken_pipe_ends_quietly(tmp_path):
    """`retain prepare ... | head`: the reader closes stdout before retain writes to it."""
    project(tmp_path, LOG)
    proc = subprocess.Popen(
        [sys.executable, "-m", "retain.cli", "prepare", str(tmp_path / "retain.toml"),
         "--out", str(tmp_path / "o"), "--quiet"],
        stdout=subprocess.PIPE, stderr=subprocess.PIPE, cwd=tmp_path)
    proc.stdout.close()  # the reader is gone before the first line
    err = proc.stderr.read().decode()
    assert proc.wait(timeout=120) == cli.EXIT_BROKEN_PIPE
    assert err == ""  # no traceback, no "internal error", no "Exception ignored"
    # the work is done before anything is printed
    assert pq.read_table(tmp_path / "o" / "start_stop.parquet").num_rows == 3


def test_broken_pipe_inside_a_command_is_caught(capsys):
    def closed(args):
        raise BrokenPipeError(32, "Broken pipe")

    cli.register("closed", "raises", lambda p: None, closed)
    try:
        assert cli.main(["closed"]) == cli.EXIT_BROKEN_PIPE
    finally:
        del cli.COMMANDS["closed"]
    assert capsys.readouterr().err == ""
