"""Fuzz: random small logs and random project files never get an engine error through.

For any project file the config reader accepts and any log, ``load_config`` +
``prepare`` either succeed with every record of the file accounted for (rows in =
the records written = used + outside window + ignored + quarantined) or raise a
:class:`RetainError` (one line: where, rule, fix). Any other exception (DuckDB's,
Arrow's, a TypeError) is a failure. The logs mix the time formats exports write
(ISO dates and times, offsets, day-first, epochs, ``infinity``, year 1 and 9999,
garbage), random text with quotes, commas, line breaks and ``#`` in every field,
unknown events and reasons, and sometimes a malformed record. One example in four
gives the same rows as an Arrow table to a project built in Python.

Bounded: 60 examples, no deadline per example (DuckDB's first query in a process
is slow), derandomised so a failure reproduces.
"""

from __future__ import annotations

import csv
import datetime as dt

import pyarrow as pa
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

from retain.data.config import load_config, tomllib
from retain.data.prepare import prepare
from retain.data.project import project as build_project
from retain.errors import RetainError

ZONES = ("UTC", "Europe/London", "America/New_York", "Asia/Kolkata")
FORMATS = (None, "%d/%m/%Y %H:%M", "epoch_seconds", "epoch_milliseconds")
EVENTS = {"signup": "start", "change": "update", "stop": "end", "halt": "pause",
          "go": "resume", "fail": "payment_failed", "ok": "payment_recovered"}

text = st.text(alphabet=st.characters(blacklist_categories=("Cs",)), max_size=8)
times = st.one_of(
    st.dates(min_value=dt.date(2023, 1, 1), max_value=dt.date(2025, 6, 30)).map(str),
    st.datetimes().map(lambda d: d.isoformat(sep=" ")),
    st.datetimes().map(lambda d: d.strftime("%d/%m/%Y %H:%M")),
    st.integers(-10**13, 10**13).map(str),
    st.sampled_from(["infinity", "-infinity", "0001-01-01", "9999-12-31 23:59:59", "",
                     "2024-02-30", "2024-03-31T01:30:00+05:30", "nan", "1e400"]),
    text,
)
numbers = st.one_of(st.floats(allow_nan=True, allow_infinity=True).map(str),
                    st.integers(-10**6, 10**6).map(str), st.sampled_from(["", "0", "inf"]), text)


@st.composite
def projects(draw):
    n_attr = draw(st.integers(0, 4))
    attrs = []
    for i in range(n_attr):
        kind = draw(st.sampled_from(["categorical", "numeric"]))
        varies = draw(st.booleans())
        ratio = kind == "numeric" and varies and draw(st.booleans())
        attrs.append((f"attr{i}", kind, varies, ratio))
    return {
        "attrs": attrs,
        "reason": draw(st.booleans()),
        "reason_map": draw(st.booleans()),
        "start": draw(st.sampled_from([None, "2023-06-01", "2024-06-30"])),
        "zone": draw(st.sampled_from(ZONES)),
        "time_format": draw(st.sampled_from(FORMATS)),
        "ignore": draw(st.booleans()),
        "delimiter": draw(st.sampled_from([",", ",", ";", "\t"])),
    }


def good_time(project, day: dt.date, minute: int) -> str:
    """A time the project's format reads (minute of the day in UTC for epochs)."""
    fmt = project["time_format"]
    if fmt is None:
        return str(day) if minute % 2 else f"{day} {minute // 60:02d}:{minute % 60:02d}:00"
    if fmt.startswith("%"):
        return f"{day:%d/%m/%Y} {minute // 60:02d}:{minute % 60:02d}"
    seconds = (day - dt.date(1970, 1, 1)).days * 86400 + minute * 60
    return str(seconds * (1000 if fmt == "epoch_milliseconds" else 1))


@st.composite
def logs(draw, project):
    """Mostly usable rows (ids from a few customers, times in the project's format,
    mapped events), one in four drawn from anything at all."""
    ids = st.one_of(st.sampled_from(["1", "2", "#3", "a,b", 'q"x', ""]), text)
    events = st.one_of(st.sampled_from(sorted(EVENTS) + ["noise", ""]), text)
    reasons = st.one_of(st.sampled_from(["price", "card", "other", ""]), text)
    days = st.dates(min_value=dt.date(2023, 1, 1), max_value=dt.date(2025, 2, 1))
    rows = []
    for _ in range(draw(st.integers(0, 25))):
        if draw(st.integers(0, 3)):
            row = [draw(st.sampled_from(["1", "2", "#3", "a,b"])),
                   good_time(project, draw(days), draw(st.integers(0, 1439))),
                   draw(st.sampled_from(["signup", "signup", "stop", "change", "fail", "ok",
                                         "halt", "go", "noise"]))]
            if project["reason"]:
                row.append(draw(st.sampled_from(["price", "card", "other", ""])))
            for _, kind, _, _ in project["attrs"]:
                row.append(draw(st.sampled_from(["1", "2.5", "40", ""]) if kind == "numeric"
                                else st.sampled_from(["Gold #2", "b", "c", ""])))
        else:
            row = [draw(ids), draw(times), draw(events)]
            if project["reason"]:
                row.append(draw(reasons))
            for _, kind, _, _ in project["attrs"]:
                row.append(draw(numbers if kind == "numeric" else text))
        rows.append(row)
    malformed = draw(st.sampled_from([None, None, "short,row", 'x,"open quote,y']))
    return rows, malformed


def write_project(folder, project, rows, malformed) -> int:
    """Write the log and retain.toml; return the number of records in the log."""
    header = ["id", "time", "event"] + (["why"] if project["reason"] else []) + \
        [name for name, *_ in project["attrs"]]
    with open(folder / "events.csv", "w", newline="", encoding="utf-8") as fh:
        w = csv.writer(fh, delimiter=project["delimiter"])
        w.writerow(header)
        w.writerows(rows)
        if malformed is not None:
            fh.write(malformed + "\n")
    columns = 'customer_id = "id"\nevent_time = "time"\nevent = "event"\n'
    if project["reason"]:
        columns += 'reason = "why"\n'
    if project["time_format"]:
        columns += f'time_format = "{project["time_format"]}"\n'
    events = ", ".join(f'{k} = "{v}"' for k, v in EVENTS.items())
    delimiter = {",": ",", ";": ";", "\t": "\\t"}[project["delimiter"]]
    text = (f'[source]\npath = "events.csv"\ndelimiter = "{delimiter}"\n\n[columns]\n{columns}\n'
            f"[events]\nmap = {{ {events} }}\n"
            + ('ignore = ["noise"]\n' if project["ignore"] else "") + "\n")
    if project["reason"] and project["reason_map"]:
        text += '[reasons]\nmap = { price = "voluntary", card = "involuntary" }\n' \
                'ignore = ["other"]\n\n'
    text += f'[window]\nas_of = "2024-12-31"\ntimezone = "{project["zone"]}"\n'
    if project["start"]:
        text += f'start = "{project["start"]}"\n'
    for name, kind, varies, ratio in project["attrs"]:
        text += (f'\n[attributes.{name}]\nkind = "{kind}"\nvaries = {str(varies).lower()}\n'
                 + ("ratio = true\n" if ratio else ""))
    text += '\n[engine]\nmemory_limit = "512MB"\nthreads = 1\n'
    (folder / "retain.toml").write_text(text, encoding="utf-8")
    # the malformed record: a short row is one record; an open quote runs to the end
    return len(rows) + (malformed is not None)


def read_header(path, delimiter: str) -> list[str]:
    with open(path, newline="", encoding="utf-8") as fh:
        return next(csv.reader(fh, delimiter=delimiter))


@settings(max_examples=60, deadline=None, derandomize=True, database=None,
          suppress_health_check=[HealthCheck.too_slow, HealthCheck.function_scoped_fixture,
                                 HealthCheck.data_too_large])
@given(data=st.data())
def test_prepare_succeeds_and_balances_or_raises_a_retain_error(tmp_path_factory, data):
    folder = tmp_path_factory.mktemp("fuzz")
    project = data.draw(projects())
    rows, malformed = data.draw(logs(project))
    in_memory = data.draw(st.integers(0, 3)) == 0  # one in four: the same rows as Arrow
    n_records = write_project(folder, project, rows, None if in_memory else malformed)
    try:
        config = load_config(folder / "retain.toml")
        if in_memory:
            doc = tomllib.loads((folder / "retain.toml").read_text(encoding="utf-8"))
            header = read_header(folder / "events.csv", project["delimiter"])
            table = pa.table({name: pa.array([r[i] or None for r in rows], type=pa.string())
                              for i, name in enumerate(header)})
            doc.pop("source")
            config = build_project(table, **doc)
        prepared = prepare(config)
    except RetainError as exc:
        assert "\n" not in exc.message  # one line
        return
    rec = prepared.reconciliation
    assert rec.rows_in == n_records
    assert rec.rows_in == rec.used + rec.outside_window + rec.ignored + rec.quarantined
    assert prepared.quarantine.num_rows == rec.quarantined
