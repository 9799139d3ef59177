"""A project built in Python: the settings of retain.toml as keyword arguments.

:func:`project` builds the same document a retain.toml holds and hands it to the
same validation (:func:`retain.data.config.parse_config`), so both routes accept
and refuse exactly the same settings with the same messages. The source may be a
table in memory (a pandas DataFrame, a pyarrow Table or a DuckDB relation) or a
path; relative paths are relative to the current folder.
"""

from __future__ import annotations

from collections.abc import Mapping
from pathlib import Path
from typing import Any

from retain.data.config import Config, parse_config
from retain.errors import ConfigError

#: how messages name a project that has no file
PROJECT = Path("(project built in Python)")


def project(source: Any, *, columns: Mapping[str, str], events: Mapping[str, Any],
            window: Mapping[str, Any], attributes: Mapping[str, Mapping[str, Any]] | None = None,
            reasons: Mapping[str, Any] | None = None, **sections: Mapping[str, Any]) -> Config:
    """The validated settings of a project, without a retain.toml.

    Parameters
    ----------
    source : DataFrame, pyarrow.Table, DuckDB relation, str, Path or mapping
        The event log: a table in memory (every column is read as text, as from a
        file), the path of a CSV or Parquet file (or glob), or a mapping with the
        keys of ``[source]`` (``{"path": "log.csv", "delimiter": ";"}``).
    columns, events, window, attributes, reasons : mapping
        The sections of the same names, as in retain.toml (DEVELOPERS.md, "The
        project file"), e.g. ``events={"map": {"signup": "start", "cancel": "end"}}``
        and ``attributes={"plan": {"kind": "categorical", "varies": True}}``.
    **sections : mapping
        Any other section: project, segments, model, value, experiments, engine, output,
        check.

    Returns
    -------
    Config
        What :func:`retain.data.config.load_config` returns for the same settings.

    Raises
    ------
    ConfigError
        As for a retain.toml, naming the section and key.
    """
    if isinstance(source, (str, Path)):
        src: dict[str, Any] = {"path": str(source)}
    elif isinstance(source, Mapping):
        src = dict(source)
    else:
        src = {"data": source}
    doc: dict[str, Any] = {"source": src, "columns": _plain(columns, "columns"),
                           "events": _plain(events, "events"),
                           "window": _plain(window, "window")}
    if attributes is not None:
        doc["attributes"] = {name: _plain(body, f"attributes.{name}")
                             for name, body in _plain(attributes, "attributes").items()}
    if reasons is not None:
        doc["reasons"] = _plain(reasons, "reasons")
    for name, body in sections.items():
        doc[name] = _plain(body, name)
    return parse_config(doc, PROJECT)


def _plain(value: Any, name: str) -> dict[str, Any]:
    """A section as the plain dict the toml reader would give (lists for tuples)."""
    if not isinstance(value, Mapping):
        raise ConfigError(f"{PROJECT}: [{name}]", f"must be a mapping, got {type(value).__name__}",
                          f"pass {name}={{...}} with the keys of [{name}]")
    return {str(k): (list(v) if isinstance(v, tuple) else
                     dict(v) if isinstance(v, Mapping) else v) for k, v in value.items()}
