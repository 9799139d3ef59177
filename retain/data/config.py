"""retain.toml -> a frozen :class:`Config`, validated once.

The file format is fixed (see DEVELOPERS.md, "The project file"). Every
problem raises :class:`~retain.errors.ConfigError` naming the file, the
section and key, the rule, and the allowed values. Paths are resolved
relative to the toml file.
"""

from __future__ import annotations

import dataclasses
import datetime as dt
import difflib
import functools
import re
import sys
from collections.abc import Mapping
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

from retain.data.contract import (
    CAUSES,
    COHORT,
    CORE_COLUMNS,
    DERIVED,
    KINDS,
    PREPARED_COLUMNS,
    group_prefix,
    ratio_column,
)
from retain.errors import ConfigError

if sys.version_info >= (3, 11):
    import tomllib
else:  # pragma: no cover - Python 3.10 only
    import tomli as tomllib

#: Our event vocabulary, in the fixed order same-day events are applied.
EVENTS = ("start", "update", "pause", "resume", "payment_failed", "payment_recovered", "end")
CURVES = ("weibull", "exponential", "cox", "km_weibull_tail", "renewal")
FORMATS = ("csv", "parquet")
#: rules for missing covariate values (retain.models.missing applies them)
MISSING_RULES = ("stop", "complete_cases", "missing_level")
#: text encodings DuckDB's CSV reader knows without an extension
ENCODINGS = ("utf-8", "utf-16", "latin-1")
#: keys of [source] that only a CSV log takes
CSV_KEYS = ("delimiter", "quote", "escape", "header", "encoding")
#: [columns] time_format values that are not a strptime pattern
EPOCHS = ("epoch_seconds", "epoch_milliseconds")
#: Columns the start-stop table always has (an attribute may not take these names).
CORE_OUTPUT = PREPARED_COLUMNS

_NAME = re.compile(r"^[A-Za-z][A-Za-z0-9_]*$")
_MEMORY = re.compile(r"^\s*\d+(\.\d+)?\s*(B|KB|MB|GB|TB|KIB|MIB|GIB|TIB)\s*$", re.IGNORECASE)
_COHORT = re.compile(r"^\d{4}-(0[1-9]|1[0-2])$")


# ---------------------------------------------------------------------- sections
@dataclass(frozen=True)
class CsvDialect:
    """How a CSV log is read: pinned, never guessed (no comment character, ever)."""

    delimiter: str = ","
    quote: str = '"'
    escape: str = '"'
    header: bool = True
    encoding: str = "utf-8"

    def describe(self) -> str:
        """One line for ``retain check``."""
        head = "first row is the header" if self.header else "no header row (column1, column2, ...)"
        return (f"CSV, delimiter {self.delimiter!r}, quote {self.quote!r}, escape "
                f"{self.escape!r}, {head}, encoding {self.encoding}, no comment character")


@dataclass(frozen=True)
class SourceConfig:
    """Where the event log is: a file (or glob), a table in a DuckDB file, or an
    object in memory (a DataFrame, an Arrow table or a DuckDB relation)."""

    path: Path | None
    duckdb: Path | None
    table: str | None
    format: str  # "csv", "parquet", "duckdb" or "memory"
    dialect: CsvDialect = field(default_factory=CsvDialect)
    data: Any = field(default=None, compare=False, repr=False)  # format "memory" only

    @property
    def label(self) -> str:
        if self.format == "duckdb":
            return f"{self.duckdb} table {self.table}"
        if self.format == "memory":
            return f"the {type(self.data).__name__} given as source"
        return str(self.path)

    def describe(self) -> str:
        """How the log is read, in one line (``retain check`` prints it)."""
        if self.format == "csv":
            return self.dialect.describe()
        if self.format == "parquet":
            return "Parquet, every column read as text"
        if self.format == "duckdb":
            return "DuckDB table, every column read as text"
        return f"{type(self.data).__name__} in memory, every column read as text"


@dataclass(frozen=True)
class ColumnMap:
    """Our column name -> the user's column name."""

    customer_id: str
    event_time: str
    event: str
    reason: str | None = None
    #: None (ISO 8601 text; a date alone is midnight), a strptime pattern, or
    #: "epoch_seconds" / "epoch_milliseconds"
    time_format: str | None = None

    @property
    def time_kind(self) -> str:
        """How normalise parses the time: iso, pattern, epoch_seconds or epoch_milliseconds."""
        if self.time_format is None:
            return "iso"
        return self.time_format if self.time_format in EPOCHS else "pattern"


@dataclass(frozen=True)
class EventMap:
    map: Mapping[str, str]
    ignore: tuple[str, ...] = ()
    strict: bool = False


@dataclass(frozen=True)
class ReasonMap:
    map: Mapping[str, str] = field(default_factory=dict)
    ignore: tuple[str, ...] = ()
    strict: bool = False


@dataclass(frozen=True)
class WindowConfig:
    as_of: dt.date
    start: dt.date | None = None
    timezone: str = "UTC"


@dataclass(frozen=True)
class AttributeSpec:
    name: str
    column: str
    kind: str  # "categorical" | "numeric"
    varies: bool
    ratio: bool = False

    @property
    def prefix(self) -> str:
        """Column prefix the SQL steps use to find this attribute's group
        (:func:`retain.data.contract.group_prefix`)."""
        return group_prefix(self.kind, self.varies, self.ratio)


@dataclass(frozen=True)
class SegmentsConfig:
    by: tuple[str, ...] = ()


@dataclass(frozen=True)
class ModelConfig:
    covariates: tuple[str, ...] = ()
    strata: tuple[str, ...] = ()
    reference: Mapping[str, str] = field(default_factory=dict)
    missing: str = "stop"  # stop | complete_cases | missing_level (retain.models.missing)
    piecewise_cuts: tuple[float, ...] | None = None  # days of tenure; None: the default bands
    decrement_edges: tuple[float, ...] | None = None  # days of tenure; None: 30.44-day months


#: the monthly price column read when no [value] price is named
PRICE_COLUMN = "price"


@dataclass(frozen=True)
class ValueConfig:
    price: str | None = None
    margin_rate: float | None = None
    margin_per_month: float | None = None
    annual_discount_rate: float = 0.10
    horizon_months: int = 60
    curve: str = "weibull"
    currency: str | None = None  # e.g. "EUR", printed beside every money figure
    decimals: int = 2  # per-customer money figures; totals of many customers show none
    thousands: str = ","  # thousands separator ("." makes "," the decimal mark)

    @property
    def price_column(self) -> str:
        """The numeric attribute holding the monthly price (:data:`PRICE_COLUMN` if unnamed)."""
        return self.price or PRICE_COLUMN


@dataclass(frozen=True)
class ExperimentSpec:
    name: str
    arm: str
    control: str
    treatment: tuple[str, ...] | None = None
    cohorts: tuple[str, ...] | None = None
    signup_from: dt.date | None = None
    signup_to: dt.date | None = None
    horizon_days: int = 365
    covariates: tuple[str, ...] = ()
    target_hazard_ratio: float | None = None  # the effect the experiment was sized for
    power: float = 0.8


@dataclass(frozen=True)
class CheckConfig:
    """When ``retain check`` fails instead of quarantining quietly."""

    max_unparseable_share: float = 0.01
    max_unknown_event_share: float = 0.01


@dataclass(frozen=True)
class EngineConfig:
    memory_limit: str = "4GB"
    threads: int = 2
    temp_directory: Path | None = None


@dataclass(frozen=True)
class OutputConfig:
    dir: Path
    compress: bool = False


@dataclass(frozen=True)
class ProjectConfig:
    """What the project is called: ``name`` titles the site (None: the log file's name)."""

    name: str | None = None


@dataclass(frozen=True)
class Config:
    """A validated retain.toml."""

    path: Path
    source: SourceConfig
    columns: ColumnMap
    events: EventMap
    reasons: ReasonMap
    window: WindowConfig
    attributes: tuple[AttributeSpec, ...]
    segments: SegmentsConfig
    model: ModelConfig
    value: ValueConfig
    experiments: tuple[ExperimentSpec, ...]
    engine: EngineConfig
    output: OutputConfig
    check: CheckConfig = field(default_factory=CheckConfig)
    project: ProjectConfig = field(default_factory=ProjectConfig)

    def attribute(self, name: str) -> AttributeSpec:
        for a in self.attributes:
            if a.name == name:
                return a
        raise KeyError(name)

    @property
    def output_columns(self) -> tuple[str, ...]:
        """Columns of the start-stop table ``prepare`` writes, in order."""
        return output_columns(self.attributes)


def output_columns(attributes: tuple[AttributeSpec, ...]) -> tuple[str, ...]:
    static = [a.name for a in attributes if not a.varies]
    varying = [a.name for a in attributes if a.varies]
    ratios = [ratio_column(a.name) for a in attributes if a.ratio]
    return (*CORE_OUTPUT, *static, *varying, *ratios, *DERIVED)


# ---------------------------------------------------------------------- settings given in Python
def as_date(value: Any, where: str) -> dt.date | None:
    """A date from a ``date``, a ``datetime`` or "YYYY-MM-DD" text; None for None or blank text.

    The one place text becomes a date for settings given in Python (the as-of
    date of a run, an experiment's signup dates); inside, only dates travel.
    """
    if value is None or (isinstance(value, str) and not value.strip()):
        return None
    if isinstance(value, dt.datetime):
        return value.date()
    if isinstance(value, dt.date):
        return value
    try:
        return dt.date.fromisoformat(str(value).strip())
    except ValueError as exc:
        raise ConfigError(where, f"{value!r} is not a date",
                          'write it as "YYYY-MM-DD", e.g. "2026-11-30"') from exc


def _settings_keys(cls: type, spec: Mapping[str, Any], where: str) -> dict[str, Any]:
    allowed = [f.name for f in dataclasses.fields(cls)]
    unknown = [k for k in spec if k not in allowed]
    if unknown:
        raise ConfigError(where, f"unknown key {unknown[0]!r}",
                          f"allowed keys: {', '.join(allowed)}")
    return dict(spec)


def model_settings(spec: ModelConfig | Mapping[str, Any] | None) -> ModelConfig:
    """``[model]`` settings as a :class:`ModelConfig`: one as it is, or a mapping with its
    keys (lists become tuples; the class's defaults for the keys left out)."""
    if isinstance(spec, ModelConfig):
        return spec
    keys = _settings_keys(ModelConfig, spec or {}, "[model]")
    for key in ("covariates", "strata", "piecewise_cuts", "decrement_edges"):
        if keys.get(key) is not None:
            keys[key] = tuple(keys[key])
    if "reference" in keys:
        keys["reference"] = dict(keys["reference"] or {})
    return ModelConfig(**keys)


def value_settings(spec: ValueConfig | Mapping[str, Any] | None) -> ValueConfig:
    """``[value]`` settings as a :class:`ValueConfig`: one as it is, or a mapping with its
    keys (the class's defaults for the keys left out; None: every default)."""
    if isinstance(spec, ValueConfig):
        return spec
    return ValueConfig(**_settings_keys(ValueConfig, spec or {}, "[value]"))


def experiment_settings(spec: ExperimentSpec | Mapping[str, Any]) -> ExperimentSpec:
    """``[experiments.<name>]`` settings as an :class:`ExperimentSpec`: one as it is, or a
    mapping with its keys (lists become tuples, "YYYY-MM-DD" text becomes a date; the name
    defaults to "experiment")."""
    if isinstance(spec, ExperimentSpec):
        return spec
    keys = _settings_keys(ExperimentSpec, spec, "[experiments]")
    name = str(keys.pop("name", None) or "experiment")
    where = f"[experiments.{name}]"
    for key in ("arm", "control"):
        if not keys.get(key):
            raise ConfigError(f"{where} {key}", "is required", f"add {key} = ... to the "
                              "experiment")
    for key in ("treatment", "cohorts"):
        if keys.get(key) is not None:
            keys[key] = tuple(keys[key])
    keys["covariates"] = tuple(keys.get("covariates") or ())
    for key in ("signup_from", "signup_to"):
        keys[key] = as_date(keys.get(key), f"{where} {key}")
    return ExperimentSpec(name=name, **keys)


# ---------------------------------------------------------------------- reading
class _Section:
    """One table of the toml file; remembers the keys read so unknown ones are errors."""

    def __init__(self, file: str, name: str, data: Any, allowed: tuple[str, ...]) -> None:
        self.file = file
        self.name = name
        if not isinstance(data, dict):
            raise ConfigError(f"{file}: [{name}]", "must be a table (a [section])",
                              f"write it as [{name}] followed by key = value lines")
        self.data = data
        unknown = [k for k in data if k not in allowed]
        if unknown:
            raise ConfigError(f"{file}: [{name}]", f"unknown key {unknown[0]!r}",
                              f"allowed keys: {', '.join(allowed)}")

    def where(self, key: str) -> str:
        return f"{self.file}: [{self.name}] {key}"

    def has(self, key: str) -> bool:
        return key in self.data

    def _get(self, key: str, required: bool) -> Any:
        if key not in self.data:
            if required:
                raise ConfigError(self.where(key), "is required",
                                  f"add {key} = ... to [{self.name}]")
            return None
        return self.data[key]

    def text(self, key: str, *, required: bool = False, default: str | None = None,
             allowed: tuple[str, ...] | None = None) -> Any:
        value = self._get(key, required)
        if value is None:
            return default
        if not isinstance(value, str) or not value.strip():
            raise ConfigError(self.where(key), f"must be a non-empty text, got {value!r}",
                              'write it in quotes, e.g. key = "value"')
        if allowed is not None and value not in allowed:
            raise ConfigError(self.where(key), f"{value!r} is not allowed",
                              f"allowed values: {', '.join(allowed)}")
        return value

    def boolean(self, key: str, default: bool) -> bool:
        value = self._get(key, False)
        if value is None:
            return default
        if not isinstance(value, bool):
            raise ConfigError(self.where(key), f"must be true or false, got {value!r}",
                              "write true or false without quotes")
        return value

    def number(self, key: str, *, default: float | None = None, low: float | None = None,
               high: float | None = None, integer: bool = False, required: bool = False) -> Any:
        value = self._get(key, required)
        if value is None:
            return default
        ok = isinstance(value, int) if integer else isinstance(value, (int, float))
        if isinstance(value, bool) or not ok:
            kind = "a whole number" if integer else "a number"
            raise ConfigError(self.where(key), f"must be {kind}, got {value!r}",
                              "write it without quotes")
        if (low is not None and value < low) or (high is not None and value > high):
            span = f"between {low:g} and {high:g}" if low is not None and high is not None \
                else (f">= {low:g}" if low is not None else f"<= {high:g}")
            raise ConfigError(self.where(key), f"must be {span}, got {value!r}",
                              "choose a value in that range")
        return int(value) if integer else float(value)

    def texts(self, key: str, *, default: tuple[str, ...] | None = ()) -> Any:
        value = self._get(key, False)
        if value is None:
            return default
        if not isinstance(value, list) or not all(isinstance(v, str) for v in value):
            raise ConfigError(self.where(key), f"must be a list of texts, got {value!r}",
                              'write it as ["a", "b"]')
        return tuple(value)

    def mapping(self, key: str) -> dict[str, str]:
        value = self._get(key, False)
        if value is None:
            return {}
        if not isinstance(value, dict) or not all(isinstance(v, str) for v in value.values()):
            raise ConfigError(self.where(key), f"must be a table of text values, got {value!r}",
                              'write it as { their_value = "our_value", ... }')
        return {str(k): v for k, v in value.items()}

    def date(self, key: str, *, required: bool = False) -> dt.date | None:
        value = self._get(key, required)
        if value is None:
            return None
        if isinstance(value, dt.datetime):
            value = value.date()
        if isinstance(value, dt.date):
            return value
        if isinstance(value, str):
            try:
                return dt.date.fromisoformat(value.strip())
            except ValueError:
                pass
        raise ConfigError(self.where(key), f"{value!r} is not a date",
                          'write it as "YYYY-MM-DD", e.g. "2026-11-30"')


@functools.cache
def _timezones() -> frozenset[str]:
    import duckdb

    con = duckdb.connect()
    try:
        rows = con.execute("select name from pg_timezone_names()").fetchall()
        return frozenset(r[0] for r in rows)
    finally:
        con.close()


_SECTIONS = ("project", "source", "columns", "events", "reasons", "window", "attributes",
             "segments", "model", "value", "experiments", "engine", "output", "check")


def load_config(path: str | Path) -> Config:
    """Read and validate a retain.toml file.

    Parameters
    ----------
    path : str or Path
        The toml file. Relative paths inside it are relative to its folder.

    Returns
    -------
    Config
        Frozen, validated configuration.

    Raises
    ------
    ConfigError
        Naming the file, section and key, the rule and the allowed values.
    """
    path = Path(path)
    file = str(path)
    if not path.is_file():
        raise ConfigError(file, "file not found", "give the path of your retain.toml")
    try:
        data = tomllib.loads(path.read_text(encoding="utf-8"))
    except tomllib.TOMLDecodeError as exc:
        raise ConfigError(file, f"is not valid TOML ({exc})",
                          "fix the syntax at that line") from exc
    except UnicodeDecodeError as exc:
        raise ConfigError(file, "is not UTF-8 text", "save the file as UTF-8") from exc
    return parse_config(data, path)


def parse_config(data: dict[str, Any], path: Path) -> Config:
    """Validate an already-parsed toml document (``path`` names it and anchors paths)."""
    file = str(path)
    base = path.resolve().parent
    unknown = [k for k in data if k not in _SECTIONS]
    if unknown:
        raise ConfigError(file, f"unknown section [{unknown[0]}]",
                          f"allowed sections: {', '.join(_SECTIONS)}")
    for required in ("source", "columns", "events", "window"):
        if required not in data:
            raise ConfigError(file, f"section [{required}] is required",
                              f"add a [{required}] section (see DEVELOPERS.md)")

    source = _source(_Section(file, "source", data["source"],
                              ("path", "duckdb", "table", "format", "data", *CSV_KEYS)), base)
    columns = _columns(_Section(file, "columns", data["columns"],
                                ("customer_id", "event_time", "event", "reason",
                                 "time_format")))
    events = _events(_Section(file, "events", data["events"], ("map", "ignore", "strict")))
    reasons = _reasons(_Section(file, "reasons", data.get("reasons", {}),
                                ("map", "ignore", "strict")), events.strict)
    window = _window(_Section(file, "window", data["window"], ("as_of", "start", "timezone")))
    attributes = _attributes(file, data.get("attributes", {}), columns)
    names = set(output_columns(attributes))
    categorical = {a.name for a in attributes if a.kind == "categorical"} | {COHORT}
    segments = _segments(_Section(file, "segments", data.get("segments", {}), ("by",)), names)
    model = _model(_Section(file, "model", data.get("model", {}),
                            ("covariates", "strata", "reference", "missing", "piecewise_cuts",
                             "decrement_edges")), names, categorical)
    value = _value(_Section(file, "value", data.get("value", {}),
                            ("price", "margin_rate", "margin_per_month", "annual_discount_rate",
                             "horizon_months", "curve", "currency", "decimals",
                             "thousands")), attributes)
    experiments = _experiments(file, data.get("experiments", {}), attributes, names)
    engine = _engine(_Section(file, "engine", data.get("engine", {}),
                              ("memory_limit", "threads", "temp_directory")), base)
    output = _output(_Section(file, "output", data.get("output", {}), ("dir", "compress")), base)
    check = _check(_Section(file, "check", data.get("check", {}),
                            ("max_unparseable_share", "max_unknown_event_share")))
    named = ProjectConfig(name=_Section(file, "project", data.get("project", {}),
                                        ("name",)).text("name"))
    return Config(path=path, source=source, columns=columns, events=events, reasons=reasons,
                  window=window, attributes=attributes, segments=segments, model=model,
                  value=value, experiments=experiments, engine=engine, output=output,
                  check=check, project=named)


def _source(s: _Section, base: Path) -> SourceConfig:
    if s.has("data"):
        return _memory_source(s)
    p = s.text("path")
    db = s.text("duckdb")
    table = s.text("table")
    fmt = s.text("format", allowed=FORMATS)
    if p is None and db is None:
        raise ConfigError(s.where("path"), "is required (or duckdb + table)",
                          'add path = "events.csv" or duckdb = "file.duckdb" and table = "events"')
    if p is not None and db is not None:
        raise ConfigError(s.where("duckdb"), "give either path or duckdb, not both",
                          "remove one of them")
    if db is not None:
        if table is None:
            raise ConfigError(s.where("table"), "is required with duckdb",
                              'add table = "the table holding the events"')
        if fmt is not None:
            raise ConfigError(s.where("format"), "does not apply to a DuckDB table",
                              "remove format")
        dbpath = (base / db).resolve()
        if not dbpath.is_file():
            raise ConfigError(s.where("duckdb"), f"file not found: {dbpath}", "fix the path")
        if not re.fullmatch(r"[A-Za-z_][A-Za-z0-9_]*(\.[A-Za-z_][A-Za-z0-9_]*)?", table):
            raise ConfigError(s.where("table"), f"{table!r} is not a plain table name",
                              "use letters, digits and _ (optionally schema.table)")
        return SourceConfig(path=None, duckdb=dbpath, table=table, format="duckdb")
    if table is not None:
        raise ConfigError(s.where("table"), "only applies with duckdb = ...",
                          "remove table or add duckdb")
    full = base / p
    if fmt is None:
        low = p.lower()
        if low.endswith((".csv", ".csv.gz", ".tsv", ".txt", ".csv.zst")):
            fmt = "csv"
        elif low.endswith((".parquet", ".pq")):
            fmt = "parquet"
        else:
            raise ConfigError(s.where("path"), f"cannot tell the format of {p!r}",
                              f'add format = one of: {", ".join(FORMATS)}')
    dialect = _dialect(s, fmt)
    if not any(ch in p for ch in "*?[") and not full.is_file():
        raise ConfigError(s.where("path"), f"file not found: {full}", "fix the path")
    if any(ch in p for ch in "*?[") and not list(full.parent.glob(full.name)):
        raise ConfigError(s.where("path"), f"no file matches {full}", "fix the pattern")
    return SourceConfig(path=full, duckdb=None, table=None, format=fmt, dialect=dialect)


def _is_table(obj: Any) -> bool:
    """A pandas DataFrame, a pyarrow Table or RecordBatch, or a DuckDB relation."""
    import duckdb
    import pyarrow as pa

    if isinstance(obj, (pa.Table, pa.RecordBatch, duckdb.DuckDBPyRelation)):
        return True
    pandas = sys.modules.get("pandas")  # a DataFrame means pandas is already imported
    return pandas is not None and isinstance(obj, pandas.DataFrame)


def _memory_source(s: _Section) -> SourceConfig:
    """[source] data: a DataFrame, an Arrow table or a DuckDB relation (Python only)."""
    obj = s.data["data"]
    others = [k for k in ("path", "duckdb", "table", "format", *CSV_KEYS) if s.has(k)]
    if others:
        raise ConfigError(s.where(others[0]), "does not apply with data (a table in memory)",
                          f"remove {others[0]}")
    if not _is_table(obj):
        raise ConfigError(s.where("data"), f"a {type(obj).__name__} is not a table retain can "
                          "read", "give a pandas DataFrame, a pyarrow Table or a DuckDB "
                          "relation (or a path to a CSV or Parquet file)")
    return SourceConfig(path=None, duckdb=None, table=None, format="memory", data=obj)


def _one_character(s: _Section, key: str, default: str) -> str:
    value = s.data.get(key, default)
    if not isinstance(value, str) or len(value) != 1 or value in "\r\n":
        raise ConfigError(s.where(key), f"must be one character, got {value!r}",
                          f'write it as {key} = "{default}" (a tab is "\\t")')
    return value


def _dialect(s: _Section, fmt: str) -> CsvDialect:
    """The CSV dialect from [source] (only a CSV log takes these keys)."""
    if fmt != "csv":
        for key in CSV_KEYS:
            if s.has(key):
                raise ConfigError(s.where(key), f"only applies to a CSV log (format is {fmt})",
                                  f"remove {key}")
        return CsvDialect()
    delimiter = _one_character(s, "delimiter", ",")
    quote = _one_character(s, "quote", '"')
    escape = _one_character(s, "escape", quote)
    if delimiter == quote:
        raise ConfigError(s.where("quote"), f"is the same character as the delimiter "
                          f"({delimiter!r})", "give the quote and the delimiter different "
                          "characters")
    encoding = s.text("encoding", default="utf-8").lower().replace("_", "-")
    encoding = {"utf8": "utf-8", "utf16": "utf-16", "latin1": "latin-1",
                "iso-8859-1": "latin-1"}.get(encoding, encoding)
    if encoding not in ENCODINGS:
        raise ConfigError(s.where("encoding"), f"{s.data['encoding']!r} is not an encoding "
                          "retain can read", f"allowed values: {', '.join(ENCODINGS)} (or "
                          "convert the file to UTF-8)")
    return CsvDialect(delimiter=delimiter, quote=quote, escape=escape,
                      header=s.boolean("header", True), encoding=encoding)


def _columns(s: _Section) -> ColumnMap:
    c = ColumnMap(customer_id=s.text("customer_id", required=True),
                  event_time=s.text("event_time", required=True),
                  event=s.text("event", required=True),
                  reason=s.text("reason"),
                  time_format=_time_format(s))
    seen: dict[str, str] = {}
    for ours in ("customer_id", "event_time", "event", "reason"):
        theirs = getattr(c, ours)
        if theirs is None:
            continue
        if theirs in seen:
            raise ConfigError(s.where(ours), f"column {theirs!r} is already mapped to "
                              f"{seen[theirs]}", "map each of our columns to a different column")
        seen[theirs] = ours
    return c


def _time_format(s: _Section) -> str | None:
    fmt = s.text("time_format")
    if fmt is None or fmt in EPOCHS:
        return fmt
    fix = ('write a strptime pattern such as "%d/%m/%Y %H:%M" or "%Y-%m-%dT%H:%M:%S%z", '
           f"or one of: {', '.join(EPOCHS)}")
    if "%" not in fmt:
        raise ConfigError(s.where("time_format"), f"{fmt!r} is neither a strptime pattern "
                          "nor an epoch unit", fix)
    import duckdb

    con = duckdb.connect()
    try:
        con.execute("select try_strptime('', ?)", [fmt]).fetchall()
    except duckdb.Error as exc:
        detail = str(exc).strip().splitlines()[0].split(": ", 1)[-1]
        raise ConfigError(s.where("time_format"), f"{fmt!r} is not a pattern DuckDB's strptime "
                          f"reads ({detail})", fix) from exc
    finally:
        con.close()
    return fmt


def _check(s: _Section) -> CheckConfig:
    return CheckConfig(
        max_unparseable_share=s.number("max_unparseable_share", default=0.01, low=0.0,
                                       high=1.0),
        max_unknown_event_share=s.number("max_unknown_event_share", default=0.01, low=0.0,
                                         high=1.0))


def _events(s: _Section) -> EventMap:
    m = s.mapping("map")
    if not m:
        raise ConfigError(s.where("map"), "is required and must not be empty",
                          'add map = { signup = "start", cancel = "end", ... }')
    ignore = _checked_map(s, m, EVENTS, "an event of ours")
    for needed in ("start", "end"):
        if needed not in m.values():
            raise ConfigError(s.where("map"), f"no event maps to {needed!r}",
                              f"map the value that marks a spell's {needed} onto {needed!r}")
    return EventMap(map=m, ignore=ignore, strict=s.boolean("strict", False))


def _checked_map(s: _Section, m: dict, allowed: tuple, what: str) -> tuple:
    """Check a ``map`` of their values onto ours and its ``ignore`` list; return the list.

    Checked in this order: every mapped value is in ``allowed``; no value is
    both mapped and ignored.
    """
    for theirs, ours in m.items():
        if ours not in allowed:
            raise ConfigError(s.where(f"map.{theirs}"), f"{ours!r} is not {what}",
                              f"allowed values: {', '.join(allowed)}")
    ignore = s.texts("ignore")
    both = sorted(set(ignore) & set(m))
    if both:
        raise ConfigError(s.where("ignore"), f"{both[0]!r} is both mapped and ignored",
                          "remove it from one of map and ignore")
    return ignore


def _reasons(s: _Section, strict_default: bool) -> ReasonMap:
    m = s.mapping("map")
    ignore = _checked_map(s, m, CAUSES, "a cause")
    return ReasonMap(map=m, ignore=ignore, strict=s.boolean("strict", strict_default))


def _window(s: _Section) -> WindowConfig:
    as_of = s.date("as_of", required=True)
    start = s.date("start")
    tz = s.text("timezone", default="UTC")
    if start is not None and start > as_of:
        raise ConfigError(s.where("start"), f"{start} is after as_of {as_of}",
                          "the observation window must start before as_of")
    if start is not None and start == as_of:
        raise ConfigError(s.where("start"), f"{start} is as_of itself: a window of no days",
                          "set start before as_of (or remove start to use the whole log)")
    zones = _timezones()
    if tz not in zones:
        near = nearest_zones(tz, zones)
        hint = f"did you mean {' or '.join(near)}?" if near else \
            "use an IANA name such as UTC or Europe/London"
        raise ConfigError(s.where("timezone"), f"unknown time zone {tz!r}", hint)
    return WindowConfig(as_of=as_of, start=start, timezone=tz)


def nearest_zones(name: str, zones: frozenset[str] | set[str], n: int = 3) -> list[str]:
    """Up to ``n`` zone names nearest to ``name``: a match ignoring case first, then
    difflib's closest spellings (case ignored)."""
    by_lower: dict[str, str] = {}
    for z in sorted(zones):
        by_lower.setdefault(z.lower(), z)
    key = name.strip().lower()
    if key in by_lower:
        return [by_lower[key]]
    close = difflib.get_close_matches(key, list(by_lower), n=n, cutoff=0.6)
    return [by_lower[c] for c in close]


def _attributes(file: str, data: Any, columns: ColumnMap) -> tuple[AttributeSpec, ...]:
    if not isinstance(data, dict):
        raise ConfigError(f"{file}: [attributes]", "must hold [attributes.<name>] tables",
                          "write [attributes.plan] with kind and varies")
    reserved = set(CORE_OUTPUT) | set(DERIVED) | {"event_time", "event", "reason", "source_row"}
    used = {columns.customer_id, columns.event_time, columns.event, columns.reason} - {None}
    out: list[AttributeSpec] = []
    taken: set[str] = set()
    owner: dict[str, str] = {}  # the log's column -> the attribute reading it
    lower: dict[str, str] = {}  # attribute names ignoring case (SQL names ignore it)
    for name, body in data.items():
        s = _Section(file, f"attributes.{name}", body, ("kind", "varies", "column", "ratio"))
        if not _NAME.match(name):
            raise ConfigError(f"{file}: [attributes.{name}]", f"{name!r} is not a usable name",
                              "start with a letter; use letters, digits and _")
        if name in reserved:
            raise ConfigError(f"{file}: [attributes.{name}]", f"{name!r} is a reserved column",
                              f"rename it; reserved: {', '.join(sorted(reserved))}")
        kind = s.text("kind", required=True, allowed=KINDS)
        if "varies" not in body:
            raise ConfigError(s.where("varies"), "is required",
                              "true = time-varying (update events change it); false = static")
        varies = s.boolean("varies", False)
        column = s.text("column", default=name)
        ratio = s.boolean("ratio", False)
        if ratio and not (kind == "numeric" and varies):
            raise ConfigError(s.where("ratio"), "needs kind = \"numeric\" and varies = true",
                              "a ratio to the spell's first value only changes if the value does")
        if column in used:
            raise ConfigError(s.where("column"), f"column {column!r} is already mapped in "
                              "[columns]", "an attribute needs a column of its own")
        if column in owner:
            other = owner[column]
            how = " (once static, once time-varying)" if \
                next(a for a in out if a.name == other).varies != varies else ""
            raise ConfigError(s.where("column"), f"column {column!r} is already the column of "
                              f"[attributes.{other}]{how}",
                              "declare each column once: one attribute per column")
        if name.lower() in lower:
            raise ConfigError(f"{file}: [attributes.{name}]", f"{name!r} differs from "
                              f"[attributes.{lower[name.lower()]}] only in case",
                              "give the attributes names that differ in more than case")
        owner[column] = name
        lower[name.lower()] = name
        if f"{name}_ratio" in taken or (ratio and f"{name}_ratio" in data):
            raise ConfigError(s.where("ratio"), f"{name}_ratio clashes with another attribute",
                              "rename one of them")
        taken.add(name)
        out.append(AttributeSpec(name=name, column=column, kind=kind, varies=varies, ratio=ratio))
    return tuple(out)


def _known(s: _Section, key: str, values: tuple[str, ...], names: set[str]) -> None:
    for v in values:
        if v not in names:
            raise ConfigError(s.where(key), f"{v!r} is not a column of the start-stop table",
                              f"allowed values: {', '.join(sorted(names))}")


def _segments(s: _Section, names: set[str]) -> SegmentsConfig:
    by = s.texts("by")
    _known(s, "by", by, names)
    return SegmentsConfig(by=by)


def _model(s: _Section, names: set[str], categorical: set[str]) -> ModelConfig:
    covs = s.texts("covariates")
    strata = s.texts("strata")
    allowed = names - set(CORE_COLUMNS)
    _known(s, "covariates", covs, allowed)
    _known(s, "strata", strata, allowed)
    ref = s.mapping("reference")
    for k in ref:
        if k not in categorical:
            raise ConfigError(s.where(f"reference.{k}"), f"{k!r} is not a categorical column",
                              f"allowed keys: {', '.join(sorted(categorical))}")

    def days(key: str) -> tuple[float, ...] | None:
        """An increasing list of positive tenures in days (whole or fractional)."""
        value = s.data.get(key)
        if value is None:
            return None
        ok = isinstance(value, list) and value and all(
            isinstance(v, (int, float)) and not isinstance(v, bool) for v in value)
        out = tuple(float(v) for v in value) if ok else ()
        if not ok or any(not (0 < v < float("inf")) for v in out) \
                or any(b <= a for a, b in zip(out, out[1:], strict=False)):
            raise ConfigError(s.where(key), "must be a list of increasing positive tenures in "
                              f"days, got {value!r}", f"write it as {key} = [30, 91, 182, 365]")
        return out

    return ModelConfig(covariates=covs, strata=strata, reference=ref,
                       missing=s.text("missing", default=ModelConfig.missing,
                                      allowed=MISSING_RULES),
                       piecewise_cuts=days("piecewise_cuts"),
                       decrement_edges=days("decrement_edges"))


def _value(s: _Section, attributes: tuple[AttributeSpec, ...]) -> ValueConfig:
    numeric = [a.name for a in attributes if a.kind == "numeric"]
    price = s.text("price")
    if price is not None and price not in numeric:
        raise ConfigError(s.where("price"), f"{price!r} is not a numeric attribute",
                          "allowed values: "
                          + (", ".join(numeric) or "(declare a numeric attribute)"))
    rate = s.number("margin_rate", low=0.0, high=1.0)
    per_month = s.number("margin_per_month", low=0.0)
    if rate is not None and per_month is not None:
        raise ConfigError(s.where("margin_per_month"), "give margin_rate or margin_per_month, "
                          "not both", "remove one of them")
    if rate is not None and price is None:
        raise ConfigError(s.where("margin_rate"), "needs price = the attribute holding the "
                          "monthly price", "add price = \"price\"")
    return ValueConfig(price=price, margin_rate=rate, margin_per_month=per_month,
                       annual_discount_rate=s.number(
                           "annual_discount_rate", default=ValueConfig.annual_discount_rate,
                           low=0.0, high=1.0),
                       horizon_months=s.number("horizon_months",
                                               default=ValueConfig.horizon_months, low=1,
                                               high=600, integer=True),
                       curve=s.text("curve", default=ValueConfig.curve, allowed=CURVES),
                       currency=_currency(s), decimals=s.number(
                           "decimals", default=ValueConfig.decimals, low=0, high=6,
                           integer=True),
                       thousands=_thousands(s))


THOUSANDS = (",", ".", " ", "'", "")  # the thousands separators money figures may use


def _currency(s: _Section) -> str | None:
    code = s.text("currency")
    if code is not None and (len(code) > 8 or any(c.isspace() for c in code)):
        raise ConfigError(s.where("currency"), f"{code!r} is not a short currency code",
                          'write a code of up to 8 characters without spaces, e.g. "EUR"')
    return code


def _thousands(s: _Section) -> str:
    sep = s._get("thousands", False)
    if sep is None:
        return ValueConfig.thousands
    if sep not in THOUSANDS:
        raise ConfigError(s.where("thousands"), f"{sep!r} is not a thousands separator",
                          'allowed values: ",", ".", " ", "\'", "" (none)')
    return sep


def _experiments(file: str, data: Any, attributes: tuple[AttributeSpec, ...],
                 names: set[str]) -> tuple[ExperimentSpec, ...]:
    if not isinstance(data, dict):
        raise ConfigError(f"{file}: [experiments]", "must hold [experiments.<name>] tables",
                          "write [experiments.my_test] with arm and control")
    cats = {a.name for a in attributes if a.kind == "categorical"}
    out = []
    for name, body in data.items():
        s = _Section(file, f"experiments.{name}", body,
                     ("arm", "control", "treatment", "cohorts", "signup_from", "signup_to",
                      "horizon_days", "covariates", "target_hazard_ratio", "power"))
        arm = s.text("arm", required=True)
        if arm not in cats:
            raise ConfigError(s.where("arm"), f"{arm!r} is not a categorical attribute",
                              f"allowed values: {', '.join(sorted(cats)) or '(none declared)'}")
        control = s.text("control", required=True)
        treatment = s.texts("treatment", default=None)
        if treatment is not None and control in treatment:
            raise ConfigError(s.where("treatment"), f"{control!r} is also the control",
                              "list only the treatment arms")
        cohorts = s.texts("cohorts", default=None)
        for c in cohorts or ():
            if not _COHORT.match(c):
                raise ConfigError(s.where("cohorts"), f"{c!r} is not a cohort",
                                  'write cohorts as "YYYY-MM"')
        lo, hi = s.date("signup_from"), s.date("signup_to")
        if cohorts is not None and (lo is not None or hi is not None):
            raise ConfigError(s.where("cohorts"), "give cohorts or signup_from/signup_to, not both",
                              "remove one of them")
        if cohorts is None and (lo is None or hi is None):
            raise ConfigError(s.where("cohorts"), "is required (or signup_from and signup_to)",
                              'add cohorts = ["2025-03"]')
        if lo is not None and hi is not None and lo > hi:
            raise ConfigError(s.where("signup_to"), f"{hi} is before signup_from {lo}",
                              "swap them")
        covs = s.texts("covariates")
        _known(s, "covariates", covs, names)
        target = s.number("target_hazard_ratio", low=0.01, high=100.0)
        if target == 1.0:
            raise ConfigError(s.where("target_hazard_ratio"), "1 is no effect: no number of "
                              "churns can detect it", "give the effect sized for, e.g. 0.8")
        out.append(ExperimentSpec(name=name, arm=arm, control=control, treatment=treatment,
                                  cohorts=cohorts, signup_from=lo, signup_to=hi,
                                  horizon_days=s.number("horizon_days",
                                                        default=ExperimentSpec.horizon_days,
                                                        low=1, integer=True),
                                  covariates=covs, target_hazard_ratio=target,
                                  power=s.number("power", default=ExperimentSpec.power,
                                                 low=0.5, high=0.99)))
    return tuple(out)


def _engine(s: _Section, base: Path) -> EngineConfig:
    mem = s.text("memory_limit", default="4GB")
    if not _MEMORY.match(mem):
        raise ConfigError(s.where("memory_limit"), f"{mem!r} is not a memory size",
                          'write it like "4GB" or "512MB"')
    threads = s.number("threads", default=2, low=1, high=1024, integer=True)
    tmp = s.text("temp_directory")
    return EngineConfig(memory_limit=mem.replace(" ", ""), threads=threads,
                        temp_directory=None if tmp is None else (base / tmp).resolve())


def _output(s: _Section, base: Path) -> OutputConfig:
    d = s.text("dir", default="retain_out")
    return OutputConfig(dir=(base / d).resolve(), compress=s.boolean("compress", False))
