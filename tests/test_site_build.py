"""The site build's promises: escaped, atomic, deterministic, failures shown.

Hand-worked cases on a small invented table; the browser checks live in
test_site_browser.py.
"""

from __future__ import annotations

import json
import re
import shutil
from pathlib import Path

import pytest
from _site_support import EVIL, small_table, strict_pages, tree_bytes  # noqa: F401 (autouse)

from retain.errors import BuildError
from retain.paths import TEMPLATES_DIR
from retain.publish.pages import site_content
from retain.publish.site import build_site, embed_json
from retain.run import RunOptions, attempt, run_table

OPTIONS = RunOptions(title="Site test", as_of="2026-11-30", segments=("plan", "channel"),
                     source="an invented start-stop table")


@pytest.fixture(scope="module")
def content():
    return site_content(run_table(small_table(), OPTIONS))


@pytest.fixture(scope="module")
def evil_site(tmp_path_factory):
    run = run_table(small_table(evil=True), OPTIONS)
    out = tmp_path_factory.mktemp("evil") / "site"
    build_site(site_content(run), out)
    return out


def test_embedded_json_cannot_close_its_script_element():
    """A string holding ``</script>`` or ``<!--`` is written with JSON unicode escapes."""
    text = str(embed_json({"plan": "</script><script>alert(1)</script><!--", "a&b": ">"}))
    assert "<" not in text and ">" not in text and "&" not in text
    assert json.loads(text) == {"plan": "</script><script>alert(1)</script><!--", "a&b": ">"}


def test_data_strings_are_escaped_in_every_page(evil_site):
    """The plan and the customer id named EVIL appear only escaped (HTML entities or
    JSON unicode escapes), never as a live tag."""
    seen_escaped = 0
    for page in sorted(evil_site.glob("*.html")):
        html = page.read_text(encoding="utf-8")
        assert EVIL not in html, page.name
        assert "<script>alert" not in html, page.name
        seen_escaped += html.count("&lt;script&gt;alert(1)&lt;/script&gt;")
        seen_escaped += html.count("\\u003cscript\\u003ealert(1)\\u003c/script\\u003e")
        # every <script> element is one of ours: a local src or a JSON spec
        for tag in re.findall(r"<script[^>]*>", html):
            assert re.fullmatch(r'<script (src="assets/[a-z-]+\.js"|type="application/json" '
                                r'id="spec-[a-z0-9-]+")>', tag), tag
    assert seen_escaped > 0  # the evil value did reach the pages (else the test proves nothing)


def test_same_inputs_give_identical_bytes(tmp_path):
    """Two runs from scratch (models refitted, pages rebuilt) give the same files."""
    a = build_site(site_content(run_table(small_table(), OPTIONS)), tmp_path / "a").parent
    b = build_site(site_content(run_table(small_table(), OPTIONS)), tmp_path / "b").parent
    fa, fb = tree_bytes(a), tree_bytes(b)
    assert sorted(fa) == sorted(fb)
    assert [k for k in fa if fa[k] != fb[k]] == []
    html = "".join(v.decode() for k, v in fa.items() if k.endswith(".html"))
    assert not re.search(r'"(view|param|selector|concat|layer)_\d+"', html)  # no counter names


def test_failed_build_leaves_previous_site_untouched(tmp_path, content):
    """A template that breaks on the third page makes the build fail midway."""
    out = tmp_path / "site"
    build_site(content, out)
    before = tree_bytes(out)
    broken = tmp_path / "templates"
    shutil.copytree(TEMPLATES_DIR, broken)
    page = broken / "page.html"
    page.write_text(page.read_text().replace(
        "{% block main %}", "{% block main %}{% if page.slug == 'cohorts' %}"
        "{{ no_such_variable.field }}{% endif %}", 1))
    with pytest.raises(BuildError, match="previous site was left as it was"):
        build_site(content, out, templates_dir=broken)
    assert tree_bytes(out) == before
    assert sorted(p.name for p in tmp_path.iterdir()) == ["site", "templates"]  # no leftovers


def test_refuses_to_replace_a_folder_it_did_not_write(tmp_path, content):
    out = tmp_path / "mine"
    out.mkdir()
    (out / "notes.txt").write_text("keep me")
    with pytest.raises(BuildError, match="not empty and was not written by retain"):
        build_site(content, out)
    assert (out / "notes.txt").read_text() == "keep me"


def test_a_failed_model_shows_its_message_on_its_page(tmp_path):
    """Curves by a column the table lacks: the step fails, the page says why, the rest builds."""
    opts = RunOptions(as_of="2026-11-30", segments=("plan", "no_such_column"))
    run = run_table(small_table(), opts)
    assert not run.get("curves:no_such_column").ok and run.get("curves:plan").ok
    index = build_site(site_content(run), tmp_path / "s")
    html = (index.parent / "curves.html").read_text()
    assert "This part could not be computed" in html
    assert "there is no column &#39;no_such_column&#39;" in html
    assert 'id="spec-curves-plan"' in html


def test_attempt_keeps_retain_errors_and_labels_bugs():
    from retain.errors import ModelError

    def refuse():
        raise ModelError("Cox model", "no churn in the data", "widen the window")

    def bug():
        raise ZeroDivisionError("division by zero")

    assert attempt("x", refuse).error == "Cox model: no churn in the data -- widen the window"
    o = attempt("y", bug)
    assert o.kind == "internal" and o.error.startswith("internal error ZeroDivisionError")


def test_every_figure_has_guide_table_and_csv(tmp_path, content):
    index = build_site(content, tmp_path / "s")
    root = index.parent
    for page in content.pages:
        html = (root / page.filename).read_text()
        for fig in page.figures():
            assert fig.guide
            assert f'href="data/{fig.key}.csv"' in html
            csv = (root / "data" / f"{fig.key}.csv").read_text()
            assert csv.splitlines()[0] == ",".join(map(str, fig.download.columns))
    results = json.loads((root / "results.json").read_text())
    assert results["outcomes"]["km"]["value"]["n_customers"] == 400


def test_site_folder_is_readable(tmp_path, content):
    index = build_site(content, tmp_path / "s")
    assert (index.parent.stat().st_mode & 0o755) == 0o755
    assert Path(index).name == "index.html"


def test_table_files_list_what_prepare_writes(tmp_path):
    """A site built into a prepared folder keeps exactly the files `write_outputs` makes."""
    from test_prepare_support import run as prepare_rows

    from retain.data.prepare import write_outputs
    from retain.publish.site import TABLE_FILES

    rows = [("a", "2024-01-01", "signup", None, "Seedling", "10", "search", "north",
             "standard"), ("a", "2024-01-31", "cancel", "too_expensive")]
    paths = write_outputs(prepare_rows(tmp_path, rows, compress=True), tmp_path / "o")
    written = {p.name for p in (tmp_path / "o").iterdir()}
    assert written == {p.name for p in paths.values()} == TABLE_FILES


def test_a_killed_builds_leftovers_are_removed_and_a_live_build_is_not(tmp_path, content):
    """Hand-made leftovers beside the target: each kind with the outcome the rule gives."""
    import os
    import socket
    import subprocess
    import sys
    import time

    from retain.publish.site import BUILDER

    host = socket.gethostname()
    gone = subprocess.Popen([sys.executable, "-c", "pass"])
    gone.wait()  # a process id that no longer runs

    def leftover(name: str, builder: str | None, age_hours: float = 0.0) -> Path:
        folder = tmp_path / name
        folder.mkdir()
        (folder / "index.html").write_text("half a page")
        if builder is not None:
            (folder / BUILDER).write_text(builder)
        stamp = time.time() - age_hours * 3600
        os.utime(folder, (stamp, stamp))
        return folder

    killed = leftover(".site.building-k1ll3d_x", f"{gone.pid} {host}")
    old = leftover(".site.building-0ldn0pid", None, age_hours=7)
    old_live_pid = leftover(".site.building-0ld11ve_", f"{os.getpid()} {host}", age_hours=7)
    live = leftover(".site.building-l1vebu1d", f"{os.getpid()} {host}")
    young = leftover(".site.building-y0ungn0p", None)  # between mkdtemp and its file
    elsewhere = leftover(".site.building-0therh0s", f"{gone.pid} another-machine")
    not_ours = [leftover(".site.building-UPPER123", None, 30),  # not mkdtemp's alphabet
                leftover(".other.building-k1ll3d_x", f"{gone.pid} {host}"),  # another target
                leftover(".site.building-short", f"{gone.pid} {host}")]
    (tmp_path / "site").mkdir()
    previous = leftover(".site.previous-abcdefgh", None)  # killed after its swap

    index = build_site(content, tmp_path / "site")
    assert index.is_file() and not (index.parent / BUILDER).exists()
    for folder in (killed, old, old_live_pid, previous):
        assert not folder.exists(), folder.name
    for folder in (live, young, elsewhere, *not_ours):
        assert (folder / "index.html").read_text() == "half a page", folder.name
    building = [p.name for p in tmp_path.iterdir() if ".building-" in p.name]
    assert sorted(building) == sorted(p.name for p in (live, young, elsewhere, *not_ours))


def test_a_previous_site_is_kept_while_the_target_is_missing(tmp_path):
    """Killed between the two renames, the old site survives only as .previous-: keep it."""
    from retain.publish.site import remove_leftovers

    previous = tmp_path / ".site.previous-abcdefgh"
    previous.mkdir()
    assert remove_leftovers(tmp_path / "site") == []
    assert previous.is_dir()
    (tmp_path / "site").mkdir()
    assert remove_leftovers(tmp_path / "site") == [previous]
