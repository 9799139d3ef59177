"""The README as a test: its Python runs as written after ``retain demo`` and prints what
the README shows; its reconciliation is the demo's; its commands are the real ones."""

from __future__ import annotations

import re
import subprocess
import sys
from pathlib import Path

import pytest

from retain import cli

REPO = Path(__file__).resolve().parent.parent
README = (REPO / "README.md").read_text(encoding="utf-8")
BLOCK = re.compile(r"^```(\w*)\n(.*?)^```\s*$", re.M | re.S)


def blocks(language: str) -> list[str]:
    return [body for lang, body in BLOCK.findall(README) if lang == language]


@pytest.fixture(scope="module")
def demo_folder(tmp_path_factory) -> Path:
    """A folder where ``retain demo`` ran with its default --out, as a reader would."""
    folder = tmp_path_factory.mktemp("readme")
    proc = subprocess.run([sys.executable, "-m", "retain.cli", "demo", "--quiet"], cwd=folder,
                          capture_output=True, text=True, timeout=600)
    assert proc.returncode == 0, proc.stderr
    assert Path(proc.stdout.strip().splitlines()[-1]).is_file()  # index.html
    return folder


def test_the_opening_is_the_job_then_two_commands():
    head = README.split("## ", 1)[0]
    # title + one paragraph, then the set-up command and the test command
    assert head.startswith("# retain\n\n")
    first_paragraphs = head[len("# retain\n\n"):].split("```", 1)[0].strip().split("\n\n")
    assert len(first_paragraphs) == 1 and len(first_paragraphs[0]) > 200
    setup, tests = blocks("bash")[:2]
    assert setup.strip().endswith("retain demo") and 'pip install -e ".[test]"' in setup
    ci = (REPO / ".ci" / "run").read_text(encoding="utf-8")
    assert tests.strip() in ci.splitlines(), "the README's test command is the one CI runs"
    assert 'pip install -q -e ".[test]"' in ci


def test_every_command_the_readme_names_exists():
    named = set(re.findall(r"`retain ([a-z]+)\b", README))
    assert {"demo", "check", "prepare", "build"} <= named
    assert named <= set(cli.COMMANDS)


def test_python_blocks_run_and_print_what_the_readme_shows(demo_folder):
    code_blocks = blocks("python")
    shown = blocks("text")
    assert code_blocks, "the README has a Python example"
    for i, code in enumerate(code_blocks):
        proc = subprocess.run([sys.executable, "-c", code], cwd=demo_folder, capture_output=True,
                              text=True, timeout=300, env={"PATH": "/usr/bin:/bin"})
        assert proc.returncode == 0, f"README Python block {i + 1} failed:\n{proc.stderr}"
        if i < len(shown):
            assert proc.stdout.rstrip() == shown[i].rstrip(), (
                f"README block {i + 1} prints something else now:\n{proc.stdout}")


def test_the_reconciliation_shown_is_the_demos(demo_folder):
    (shown,) = blocks("csv")
    actual = (demo_folder / "retain_demo" / "reconciliation.csv").read_text(encoding="utf-8")
    assert shown.strip() == actual.strip()


def test_the_project_file_shown_is_valid_and_prepares(tmp_path):
    """The README's project file, beside a small log written the way it says (semicolons,
    day/month/year times), checks and prepares."""
    from retain import load_config, prepare

    (toml,) = blocks("toml")
    (tmp_path / "retain.toml").write_text(toml, encoding="utf-8")
    (tmp_path / "events.csv").write_text(
        "account;at;what;seats\n"
        "a1;03/01/2026 09:15;joined;5\n"
        "a1;20/02/2026 17:40;seats;9\n"
        "a1;01/03/2026 08:00;left;\n"
        "a2;11/01/2026 08:00;joined;12\n", encoding="utf-8")
    prepared = prepare(load_config(tmp_path / "retain.toml"))
    rec = prepared.reconciliation
    assert (rec.rows_in, rec.used, rec.quarantined) == (4, 4, 0)
    # a1: joined 3 Jan, seats changed 20 Feb (tenure 48), left 1 Mar (tenure 57)
    assert prepared.arrow.column("stop").to_pylist()[:2] == [48.0, 57.0]
    assert prepared.arrow.column("seats").to_pylist()[:2] == [5.0, 9.0]
