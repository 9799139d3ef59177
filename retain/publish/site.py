"""Write the static site: Jinja2 pages, one local Vega asset, CSVs and the run's JSON.

The site opens from disk with no network. The Vega, Vega-Lite and vega-embed
JavaScript comes from the installed vl-convert-python and is written once to
``assets/vega-bundle.js``; every page loads it from there.

Three promises of the build:

* **Escaped.** Every string from the data goes through Jinja2's autoescape;
  chart specs are embedded as JSON in which ``<``, ``>`` and ``&`` are written
  as ``\\u003c``, ``\\u003e`` and ``\\u0026``, so no value can close the
  ``<script>`` element that carries it.
* **Atomic.** Everything is written to a temporary folder beside the target,
  which then replaces the target by two renames. A build that fails leaves the
  previous site as it was and raises :class:`~retain.errors.BuildError`.
* **Deterministic.** The same results give byte-identical files: no clock
  times (only the as-of date), stable ordering, explicit chart names.

``results.json`` holds results, not per-row diagnostics: every long table in it
(a list of at least :data:`TABLE_ROWS` records, or a group of equally long
arrays in one object) is written to ``data/results/<where>.parquet`` and
replaced by a reference (:func:`split_tables`); :func:`read_results` puts the
tables back. So results.json grows with the number of segments and options,
not with the number of customers.
"""

from __future__ import annotations

import json
import math
import os
import re
import shutil
import socket
import tempfile
import time
from collections.abc import Callable
from functools import lru_cache
from pathlib import Path
from typing import Any

import jinja2
import numpy as np
import pandas as pd
import pyarrow as pa
import pyarrow.parquet as pq
from markupsafe import Markup

from retain.errors import BuildError, RetainError
from retain.paths import TEMPLATES_DIR
from retain.publish.content import SiteContent

MARKER = ".retain-site"
#: in a folder being built: "<pid> <host>" of the build, so that the next build
#: can tell a killed build's leftover from a build still running
BUILDER = ".retain-building"
#: a building folder whose builder cannot be asked is a leftover after this long (s)
LEFTOVER_AGE = 6 * 3600.0
#: what ``retain prepare`` writes (retain.data.prepare.write_outputs); a site built
#: into their folder keeps them (tests/test_site_build.py holds this list to it)
TABLE_FILES = frozenset({
    "start_stop.parquet", "start_stop_compressed.parquet", "quarantine.parquet",
    "quarantine.csv", "reconciliation.csv", "reconciliation.json",
})
BUNDLE_NAME = "vega-bundle.js"
#: a list of records, or a group of arrays, at least this long leaves results.json
#: for a Parquet file: below it a table is a result a reader looks at (hazard
#: ratios, AIC, one row per segment or month), at or above it a per-time or
#: per-churn diagnostic
TABLE_ROWS = 200
#: where the tables taken out of results.json go, relative to the site folder
RESULTS_TABLES = "data/results"
#: the keys of a reference that stands in results.json where a table was
REFERENCE_KEYS = frozenset({"parquet", "rows", "columns", "as"})
STATIC_FILES = ("style.css", "site.js")


@lru_cache(maxsize=2)
def vega_bundle(vl_version: str | None = None) -> str:
    """The Vega + Vega-Lite + vega-embed JavaScript, bundled by vl-convert-python.

    Bundling takes a few seconds, so the text is kept in a cache file named by
    the vl-convert, Vega and Vega-Lite versions (``$RETAIN_CACHE``, default
    ``~/.cache/retain``); the same versions always give the same bundle.

    Parameters
    ----------
    vl_version : str, optional
        Vega-Lite version as vl-convert names it (e.g. ``"6.4"``); default: the
        one matching the installed Altair's schema, else vl-convert's newest.
    """
    import vl_convert

    if vl_version is None:
        vl_version = _altair_vl_version(vl_convert.get_vegalite_versions())
    name = (f"vega-bundle-vlc{getattr(vl_convert, '__version__', 'x')}-vega"
            f"{vl_convert.get_vega_version()}-vl{vl_version or 'latest'}-embed"
            f"{vl_convert.get_vega_embed_version()}.js")
    cache = Path(os.environ.get("RETAIN_CACHE") or Path.home() / ".cache" / "retain") / name
    try:
        text = cache.read_text(encoding="utf-8")
        if text.rstrip().endswith(";") and "vegaEmbed" in text:
            return text
    except OSError:
        pass
    text = vl_convert.javascript_bundle(vl_version=vl_version)
    try:
        cache.parent.mkdir(parents=True, exist_ok=True)
        part = cache.with_name(f"{cache.name}.{os.getpid()}.part")
        part.write_text(text, encoding="utf-8")
        os.replace(part, cache)
    except OSError:
        pass  # no writable cache: bundle again next time
    return text


def _altair_vl_version(available: list[str]) -> str | None:
    try:
        import altair
    except ImportError:  # pragma: no cover - altair is a dependency
        return None
    major_minor = ".".join(altair.SCHEMA_VERSION.lstrip("v").split(".")[:2])
    return major_minor if major_minor in available else None


def embed_json(value: Any) -> Markup:
    """JSON that is safe inside ``<script type="application/json">``.

    ``<``, ``>`` and ``&`` become JSON unicode escapes, so ``</script>`` or
    ``<!--`` in any string cannot end the element; the text still parses as
    the same JSON.
    """
    text = json.dumps(value, ensure_ascii=False, separators=(",", ":"), allow_nan=False)
    text = (text.replace("<", "\\u003c").replace(">", "\\u003e").replace("&", "\\u0026")
            .replace("\u2028", "\\u2028").replace("\u2029", "\\u2029"))
    return Markup(text)


def format_cell(value: Any) -> str:
    """How a table cell reads on the page (CSV files keep full precision)."""
    if value is None or value is pd.NA or value is pd.NaT:
        return ""
    if isinstance(value, (bool, np.bool_)):
        return "yes" if value else "no"
    if isinstance(value, (int, np.integer)):
        return f"{int(value):,}"
    if isinstance(value, (float, np.floating)):
        v = float(value)
        if not math.isfinite(v):
            return "" if math.isnan(v) else ("∞" if v > 0 else "−∞")
        if v == 0:
            return "0"
        if v.is_integer() and abs(v) < 1e15:
            return f"{int(v):,}"
        if abs(v) >= 1000:
            return f"{v:,.0f}"
        if abs(v) >= 0.001:
            return f"{v:.4g}"
        return f"{v:.3g}"
    if hasattr(value, "isoformat"):
        return value.isoformat()[:10]
    return str(value)


def _is_number(value: Any) -> bool:
    return isinstance(value, (int, float, np.integer, np.floating)) and not isinstance(
        value, (bool, np.bool_))


def table_rows(frame: pd.DataFrame, limit: int | None = None
               ) -> tuple[list[str], list[list[tuple[str, bool]]]]:
    """Header and rows of a frame (at most ``limit``): each cell is (text, is a number)."""
    head = [str(c) for c in frame.columns]
    body = frame if limit is None else frame.head(limit)
    rows = [[(format_cell(v), _is_number(v)) for v in rec]
            for rec in body.itertuples(index=False, name=None)]
    return head, rows


def csv_text(frame: pd.DataFrame) -> str:
    return frame.to_csv(index=False, lineterminator="\n")


def make_environment(templates_dir: Path = TEMPLATES_DIR) -> jinja2.Environment:
    env = jinja2.Environment(
        loader=jinja2.FileSystemLoader(str(templates_dir)),
        autoescape=True,
        undefined=jinja2.StrictUndefined,
        keep_trailing_newline=True,
        trim_blocks=True,
        lstrip_blocks=True,
    )
    env.filters["cell"] = format_cell
    env.filters["embed_json"] = embed_json
    env.globals["table_rows"] = table_rows
    return env


def build_site(
    content: SiteContent,
    out_dir: str | Path,
    *,
    templates_dir: str | Path = TEMPLATES_DIR,
    progress: Callable[[str], None] | None = None,
) -> Path:
    """Write the site for ``content`` into ``out_dir`` atomically; return index.html's path.

    Parameters
    ----------
    content : SiteContent
        The pages (from :func:`retain.publish.pages.site_content`).
    out_dir : path
        Target folder. It must be absent, empty, a site this function wrote
        before (it holds a ``.retain-site`` marker) or a folder ``retain prepare``
        wrote; it is replaced as a whole, keeping the prepared tables and any
        nested site (:func:`check_target`).
    templates_dir : path
        Jinja2 templates and the site's CSS / JS (default ``site_templates/``).

    Raises
    ------
    BuildError
        Anything went wrong; the previous site (if any) is untouched.
    """
    out = Path(out_dir).resolve()
    templates = Path(templates_dir)
    check_target(out)
    out.parent.mkdir(parents=True, exist_ok=True)
    remove_leftovers(out)
    tmp = Path(tempfile.mkdtemp(prefix=f".{out.name}.building-", dir=out.parent))
    os.chmod(tmp, 0o755)  # mkdtemp makes it private; a site is meant to be read
    try:
        (tmp / BUILDER).write_text(f"{os.getpid()} {socket.gethostname()}\n", encoding="utf-8")
        _write_all(content, tmp, templates, progress)
        (tmp / BUILDER).unlink()
        _carry_over(out, tmp)
    except Exception as exc:
        shutil.rmtree(tmp, ignore_errors=True)
        if isinstance(exc, BuildError):
            raise
        where = f"site build into {out}"
        if isinstance(exc, RetainError):
            raise BuildError(where, exc.message, "the previous site was left as it was") from exc
        raise BuildError(where, f"{type(exc).__name__}: {exc}",
                         "the previous site was left as it was; rerun with --debug") from exc
    _swap_into_place(tmp, out)
    return out / "index.html"


def check_target(out: Path) -> None:
    """Refuse (BuildError) a target that is a file or a non-empty folder retain did not write.

    Retain wrote a folder when it holds a site's marker, or only what ``retain
    prepare`` writes (:data:`TABLE_FILES`) and folders that hold a site (the
    demo's ``site/``). Those are kept when the site is built into the folder.
    """
    for path in (out, *out.parents):
        if path.exists():
            if not path.is_dir():
                rule = ("the output path exists and is not a folder" if path == out else
                        f"the output path lies inside {path}, which is a file")
                raise BuildError(str(out), rule, "choose another --out")
            break
    if not out.exists() or (out / MARKER).exists():
        return
    foreign = sorted(entry.name for entry in out.iterdir() if not _kept(entry))
    if foreign:
        shown = ", ".join(foreign[:3]) + (f" and {len(foreign) - 3} more" if len(foreign) > 3
                                          else "")
        raise BuildError(str(out), f"the output folder is not empty and was not written by "
                         f"retain (it holds {shown})", "choose an empty or new folder for --out")


def remove_leftovers(out: Path, *, now: float | None = None) -> list[Path]:
    """Remove what killed builds of ``out`` left beside it; return the folders removed.

    Only retain's own temporary folders are touched: ``.<name>.building-XXXXXXXX``
    (``tempfile.mkdtemp``'s eight characters) and ``.<name>.previous-XXXXXXXX``. A
    building folder is removed when the build that made it is gone: its
    :data:`BUILDER` file names a process of this machine that no longer runs, or
    nothing in it changed for :data:`LEFTOVER_AGE` seconds (no such file yet, or
    another machine's build: no way to ask). A previous-site folder is only
    removed while ``out`` exists, that is when no build is between its two renames.
    """
    now = time.time() if now is None else now
    pattern = re.compile(rf"\.{re.escape(out.name)}\.(building|previous)-[a-z0-9_]{{8}}")
    removed = []
    try:
        entries = sorted(out.parent.iterdir())
    except OSError:
        return removed
    for entry in entries:
        match = pattern.fullmatch(entry.name)
        if match is None or entry.is_symlink() or not entry.is_dir():
            continue
        if match.group(1) == "previous":
            stale = out.is_dir()
        else:
            stale = not _build_alive(entry, now)
        if stale:
            shutil.rmtree(entry, ignore_errors=True)
            removed.append(entry)
    return removed


def _build_alive(folder: Path, now: float) -> bool:
    """Whether the build writing ``folder`` may still run (when it cannot be asked: if young).

    A running build adds files to its folder, so the folder's time of change stays
    recent; one untouched for :data:`LEFTOVER_AGE` is a leftover whatever its file says.
    """
    try:
        age = now - folder.stat().st_mtime
    except OSError:
        return False  # already gone
    if age >= LEFTOVER_AGE:
        return False
    try:
        pid_text, host = (folder / BUILDER).read_text(encoding="utf-8").split()
        pid = int(pid_text)
    except (OSError, ValueError):
        return True  # just made (the file comes next) or unreadable: leave it to age
    if host != socket.gethostname() or pid <= 0:
        return True
    try:
        os.kill(pid, 0)
    except ProcessLookupError:
        return False
    except OSError:  # the process exists and belongs to someone else
        return True
    return True


def _kept(entry: Path) -> bool:
    """Whether a site built into ``entry``'s folder keeps it (prepared tables, a nested site)."""
    if entry.is_dir() and not entry.is_symlink():
        return (entry / MARKER).is_file()
    return entry.name in TABLE_FILES and entry.is_file() and not entry.is_symlink()


def _link_or_copy(src: str | Path, dst: str | Path) -> None:
    try:
        os.link(src, dst)
    except OSError:
        shutil.copy2(src, dst)


def _carry_over(out: Path, tmp: Path) -> None:
    """Hard-link (else copy) what the new site keeps from the folder it replaces."""
    if not out.is_dir():
        return
    for entry in sorted(out.iterdir()):
        if not _kept(entry) or (tmp / entry.name).exists():
            continue
        if entry.is_dir():
            shutil.copytree(entry, tmp / entry.name, copy_function=_link_or_copy)
        else:
            _link_or_copy(entry, tmp / entry.name)


def _swap_into_place(tmp: Path, out: Path) -> None:
    old = None
    try:
        if out.exists():
            old = Path(tempfile.mkdtemp(prefix=f".{out.name}.previous-", dir=out.parent))
            old.rmdir()
            os.rename(out, old)
        os.rename(tmp, out)
    except OSError as exc:
        if old is not None and old.exists() and not out.exists():
            os.rename(old, out)
        shutil.rmtree(tmp, ignore_errors=True)
        raise BuildError(str(out), f"could not move the new site into place ({exc})",
                         "check permissions on the output folder") from exc
    if old is not None:
        shutil.rmtree(old, ignore_errors=True)


def _write_all(content: SiteContent, root: Path, templates: Path,
               progress: Callable[[str], None] | None) -> None:
    env = make_environment(templates)
    assets = root / "assets"
    data = root / "data"
    assets.mkdir()
    data.mkdir()
    (assets / BUNDLE_NAME).write_text(vega_bundle(), encoding="utf-8")
    for name in STATIC_FILES:
        src = templates / name
        if not src.exists():
            raise BuildError(str(src), "a site file is missing from the templates folder",
                             "reinstall retain or restore site_templates/")
        shutil.copyfile(src, assets / name)
    seen: set[str] = set()
    for page in content.pages:
        for fig in page.figures():
            if fig.key in seen:
                raise BuildError(f"page {page.slug!r}", f"figure key {fig.key!r} is used twice",
                                 "this is a bug in retain: figure keys must be unique")
            seen.add(fig.key)
            (data / f"{fig.key}.csv").write_text(csv_text(fig.download), encoding="utf-8")
    write_results(content.results, root)
    template = env.get_template("page.html")
    nav = [(p.filename, p.label, p.group, p.slug) for p in content.pages]
    for page in content.pages:
        if progress:
            progress(f"page {page.filename}")
        html = template.render(site=content, page=page, nav=nav, bundle=BUNDLE_NAME)
        (root / page.filename).write_text(html, encoding="utf-8")
    (root / MARKER).write_text("written by retain build; replaced as a whole on rebuild\n",
                               encoding="utf-8")


# ------------------------------------------------------------------ results.json


def write_results(results: dict[str, Any], root: Path) -> dict[str, pa.Table]:
    """Write ``root/results.json`` and its long tables as Parquet; return the tables by file.

    The Parquet files are written with fixed settings (zstd level 3, no
    statistics, no pandas metadata, nothing clock-dependent), so the same
    results give the same bytes.
    """
    small, tables = split_tables(results)
    if tables:
        (root / RESULTS_TABLES).mkdir(parents=True, exist_ok=True)
    for rel, table in tables.items():
        pq.write_table(table, root / rel, compression="zstd", compression_level=3,
                       write_statistics=False, use_dictionary=False)
    (root / "results.json").write_text(
        json.dumps(small, indent=1, ensure_ascii=False, allow_nan=False) + "\n",
        encoding="utf-8")
    return tables


def split_tables(results: dict[str, Any], min_rows: int = TABLE_ROWS
                 ) -> tuple[dict[str, Any], dict[str, pa.Table]]:
    """Take the long tables out of a JSON-ready ``results``: (what stays, tables by file).

    Two shapes leave: a list of at least ``min_rows`` records (dicts with the
    same keys in the same order and scalar values), and the arrays of at least
    ``min_rows`` scalars in one object that share a length (a curve's time,
    survival, se, ...: one file, one column each). Each is replaced by a
    reference ``{"parquet": "data/results/<where>.parquet", "rows": n,
    "columns": [...], "as": "records" | "column"}``; ``"column"`` means the
    array is the one named column. A table whose values Arrow cannot type
    (mixed text and numbers) stays where it is. ``results`` is not changed.
    """
    tables: dict[str, pa.Table] = {}

    def file_for(path: tuple[str, ...]) -> str:
        stem = ".".join(re.sub(r"[^A-Za-z0-9_-]+", "-", part).strip("-") or "x"
                        for part in path if part not in ("outcomes", "value"))[:120]
        name, k = f"{RESULTS_TABLES}/{stem}.parquet", 1
        while name in tables:
            k += 1
            name = f"{RESULTS_TABLES}/{stem}-{k}.parquet"
        return name

    def walk(value: Any, path: tuple[str, ...]) -> Any:
        if isinstance(value, list):
            table = _records_table(value, min_rows)
            if table is not None:
                rel = file_for(path)
                tables[rel] = table
                return {"parquet": rel, "rows": table.num_rows,
                        "columns": table.column_names, "as": "records"}
            return [walk(v, (*path, str(i))) for i, v in enumerate(value)]
        if not isinstance(value, dict):
            return value
        out = {k: walk(v, (*path, k)) for k, v in value.items()
               if not _scalar_array(v, min_rows)}
        arrays = {k: v for k, v in value.items() if _scalar_array(v, min_rows)}
        built = {}
        for n in sorted({len(v) for v in arrays.values()}):
            group = {k: v for k, v in arrays.items() if len(v) == n}
            table = _arrays_table(group)
            if table is None:
                out.update({k: walk(v, (*path, k)) for k, v in group.items()})
            else:
                built[n] = (group, table)
        for n, (group, table) in built.items():  # several lengths: one file each
            rel = file_for(path if len(built) == 1 else (*path, f"n{n}"))
            tables[rel] = table
            for k in group:
                out[k] = {"parquet": rel, "rows": n, "columns": [k], "as": "column"}
        return {k: out[k] for k in value}  # the keys in their order

    return walk(results, ()), tables


def read_results(site: str | Path) -> dict[str, Any]:
    """results.json of the site folder ``site`` with its Parquet tables put back in place."""
    root = Path(site)
    cache: dict[str, pa.Table] = {}

    def table(rel: str) -> pa.Table:
        if rel not in cache:
            cache[rel] = pq.read_table(root / rel)
        return cache[rel]

    def walk(value: Any) -> Any:
        if is_reference(value):
            t = table(value["parquet"])
            if value["as"] == "column":
                return t.column(value["columns"][0]).to_pylist()
            return t.select(value["columns"]).to_pylist()
        if isinstance(value, dict):
            return {k: walk(v) for k, v in value.items()}
        if isinstance(value, list):
            return [walk(v) for v in value]
        return value

    return walk(json.loads((root / "results.json").read_text(encoding="utf-8")))


def is_reference(value: Any) -> bool:
    """True for the object that stands in results.json where a table was taken out."""
    return isinstance(value, dict) and set(value) == REFERENCE_KEYS


def _is_scalar(v: Any) -> bool:
    return v is None or isinstance(v, (bool, int, float, str))


def _scalar_array(v: Any, min_rows: int) -> bool:
    return isinstance(v, list) and len(v) >= min_rows and all(map(_is_scalar, v))


def _records_table(rows: list[Any], min_rows: int) -> pa.Table | None:
    if len(rows) < min_rows or not all(isinstance(r, dict) for r in rows):
        return None
    keys = list(rows[0])
    if not keys or any(list(r) != keys or not all(map(_is_scalar, r.values())) for r in rows):
        return None
    return _arrays_table({k: [r[k] for r in rows] for k in keys})


def _arrays_table(columns: dict[str, list[Any]]) -> pa.Table | None:
    """An Arrow table of the columns, or None when a column has no one Arrow type that
    gives back the same JSON values (text mixed with numbers, booleans with numbers)."""
    arrays = []
    for values in columns.values():
        kinds = {type(v) for v in values if v is not None}
        if len(kinds) > 1 and not kinds <= {int, float}:
            return None
        try:
            arrays.append(pa.array(values, type=pa.float64() if kinds == {int, float} else None))
        except (pa.ArrowInvalid, pa.ArrowTypeError, OverflowError):
            return None
    return pa.table(arrays, names=list(columns))
