"""ARCHITECTURE.md stays true to the tree: every preparation step is in its run-order
table, the models' SQL sits apart in sql/models/, and every Markdown file a module
cites exists in the repository."""

from __future__ import annotations

import re
from pathlib import Path

from retain.data.sqlsteps import step_name

REPO = Path(__file__).resolve().parent.parent
ARCH = (REPO / "ARCHITECTURE.md").read_text(encoding="utf-8")


def _run_order_steps() -> set[str]:
    section = ARCH.split("## The preparation steps, in run order", 1)[1].split("\n## ", 1)[0]
    rows = [line for line in section.splitlines() if re.match(r"\|\s*\d+\s*\|", line)]
    return {name for row in rows for name in re.findall(r"`([a-z_]+)`", row.split("|")[2])}


def test_every_preparation_step_is_in_the_run_order_table() -> None:
    on_disk = {step_name(p) for p in (REPO / "sql").glob("*.sql")}
    listed = _run_order_steps()
    assert on_disk == listed, (f"missing from ARCHITECTURE.md: {sorted(on_disk - listed)}; "
                               f"no such file: {sorted(listed - on_disk)}")


def test_model_sql_sits_apart_from_the_preparation_steps() -> None:
    models = {p.stem for p in (REPO / "sql" / "models").glob("*.sql")}
    assert models, "sql/models/ holds no SQL"
    assert all(name.startswith("exposure_") for name in models)
    assert not list((REPO / "sql").glob("exposure_*.sql"))


def test_every_cited_markdown_file_exists() -> None:
    cited: dict[str, str] = {}
    for folder in ("retain", "tests", "bench"):
        for path in (REPO / folder).rglob("*.py"):
            for name in re.findall(r"\b([A-Z][A-Z_]+\.md)\b", path.read_text(encoding="utf-8")):
                cited.setdefault(name, str(path.relative_to(REPO)))
    assert "ARCHITECTURE.md" in cited
    missing = {name: where for name, where in cited.items()
               if not (REPO / name).exists() and not (REPO / "bench" / name).exists()}
    assert not missing, f"cited but not in the repository: {missing}"
