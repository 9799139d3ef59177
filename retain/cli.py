"""The ``retain`` command line.

Each command is a small function registered in :data:`COMMANDS` with the
function that declares its arguments; :func:`main` builds the parser from that
table, runs the command and turns a :class:`~retain.errors.RetainError` into
one line on stderr (exit code 2; the traceback only with ``--debug``).

To add a command, write ``def _cmd_x(args) -> int`` and
``def _args_x(parser)``, then ``register("x", "what it does", _args_x, _cmd_x)``.
"""

from __future__ import annotations

import argparse
import os
import sys
import traceback
from collections.abc import Callable, Sequence
from dataclasses import dataclass
from pathlib import Path

from retain import __version__
from retain.errors import ConfigError, RetainError

EXIT_ERROR = 2
EXIT_BROKEN_PIPE = 1  # the Python documentation's choice for a closed stdout


@dataclass(frozen=True)
class Command:
    name: str
    help: str
    add_arguments: Callable[[argparse.ArgumentParser], None]
    run: Callable[[argparse.Namespace], int]


COMMANDS: dict[str, Command] = {}


def register(name: str, help: str, add_arguments: Callable[[argparse.ArgumentParser], None],
             run: Callable[[argparse.Namespace], int]) -> None:
    """Add (or replace) a command in the table :func:`main` reads."""
    COMMANDS[name] = Command(name, help, add_arguments, run)


# ---------------------------------------------------------------------- shared helpers
def stderr_progress(args: argparse.Namespace) -> Callable[[str, int, float], None] | None:
    """A progress callback that prints step, rows and seconds to stderr (None if --quiet)."""
    if getattr(args, "quiet", False):
        return None

    def show(step: str, rows: int, seconds: float) -> None:
        progress_line(step, f"{rows:,} rows", seconds)

    return show


def progress_line(step: str, count: str, seconds: float) -> None:
    """One progress line on stderr, in the columns prepare and build share: the step, a
    count (or blank) and the seconds it took."""
    print(f"  {step:<16} {count:>17} {seconds:8.2f} s", file=sys.stderr, flush=True)


def print_reconciliation(prepared, *, demo: bool = False) -> None:  # noqa: ANN001
    """The reconciliation table (of a retain.data.prepare.Prepared) and every unknown event
    value, on stdout; ``demo`` says that the demo log's defects are there on purpose."""
    rec = prepared.reconciliation
    frame = rec.to_frame()
    labels = [f"{o}: {r}" if r else o for o, r, _ in frame.itertuples(index=False)]
    width = max(len(label) for label in labels) + 2
    print(f"Reconciliation of {rec.source}")
    for label, n in zip(labels, frame.n_rows, strict=True):
        print(f"  {label:<{width}} {n:>12,}")
    print(f"Start-stop table: {rec.n_intervals:,} rows, {rec.n_customers:,} customers, "
          f"{rec.n_spells:,} spells, {rec.n_churns:,} churns"
          + (" (" + ", ".join(f"{c} {n:,}" for c, n in rec.churns_by_cause.items()) + ")"
             if rec.churns_by_cause else ""))
    if prepared.unknown_events:
        print("Unknown event values (map them in [events] map or list them in [events] ignore):")
        for value, n in prepared.unknown_events.items():
            print(f"  {value!r}: {n:,} rows")
        if demo:
            print("  (the demo log carries these defects on purpose, to show the quarantine "
                  "and the data-quality page; your own log needs none of them)")


def _load(config_path: Path):  # noqa: ANN202 - retain.data.config.Config
    """The project file's Config; a folder given in its place gets its own message."""
    from retain.data.config import load_config

    if config_path.is_dir():
        inside = config_path / "retain.toml"
        raise ConfigError(str(config_path), "is a folder, not a project file",
                          f"give {inside}" if inside.is_file()
                          else "give the path of the project's retain.toml")
    return load_config(config_path)


def _prepare(args: argparse.Namespace, config_path: Path, config=None):  # noqa: ANN001,ANN202
    from retain.data.prepare import prepare

    if config is None:
        config = _load(config_path)
    return prepare(config, progress=stderr_progress(args))


def _output_folder(args: argparse.Namespace, config, below: str = "") -> Path:  # noqa: ANN001
    """``--out``, else ``[output] dir`` (+ ``below``); refused before any work if it is a file."""
    given = getattr(args, "out", None)
    out = Path(given) if given is not None else Path(config.output.dir) / below
    for path in (out, *out.resolve().parents):
        if path.exists():
            if path.is_dir():
                break
            what = "is a file" if path == out else f"lies inside {path}, which is a file"
            if given is not None:
                raise RetainError(str(out), f"{what}, not a folder (given as --out)",
                                  "give a folder for --out")
            raise ConfigError(f"{config.path}: [output] dir",
                              f"{out} {what}, not a folder",
                              "set [output] dir to a folder, or give --out")
    return out


def _write(prepared, out: Path) -> dict[str, Path]:  # noqa: ANN001
    """Write the tables; return their paths (printed by :func:`print_written`)."""
    from retain.data.prepare import write_outputs

    try:
        return write_outputs(prepared, out)
    except OSError as exc:
        raise RetainError(str(out), f"cannot write the tables ({exc.strerror or exc})",
                          "check the folder's permissions and free space") from exc


def print_written(paths: dict[str, Path]) -> None:
    for key, path in paths.items():
        print(f"wrote {key}: {path}")


# ---------------------------------------------------------------------- commands
def _args_config(parser: argparse.ArgumentParser) -> None:
    parser.add_argument("config", type=Path, help="the project's retain.toml")


def _cmd_check(args: argparse.Namespace) -> int:
    from retain.data.thresholds import check_thresholds

    prepared = _prepare(args, args.config)
    print(f"Read as: {prepared.config.source.describe()}")
    print_reconciliation(prepared)
    print_completeness(prepared)
    check_thresholds(prepared)  # too many unparseable times or unknown events: exit 2
    return 0


def print_completeness(prepared) -> None:  # noqa: ANN001 - retain.data.prepare.Prepared
    """Missing values per attribute of the start-stop table, and what the models will do."""
    from retain.data.completeness import missing_by_attribute

    found = missing_by_attribute(prepared.table)
    if not found.attributes:
        return
    if not found.incomplete:
        print(f"Attributes: no missing values ({', '.join(found.attributes)})")
        return
    print("Missing values per attribute (rows of the start-stop table):")
    for name, rows, customers in zip(found.attributes, found.rows, found.customers, strict=True):
        if rows:
            print(f"  {name:<24} {rows:>10,} of {found.n_rows:,} rows, {customers:,} customers")
    model = prepared.config.model
    hit = [c for c in model.covariates if c in found.incomplete]
    if hit and model.missing == "stop":
        print(f"  the models stop on these covariates ({', '.join(hit)}): set [model] missing = "
              '"complete_cases" (or "missing_level" for categorical ones) to fit without them')


def _args_prepare(parser: argparse.ArgumentParser) -> None:
    _args_config(parser)
    parser.add_argument("--out", type=Path, default=None,
                        help="folder for the tables (default: [output] dir in retain.toml)")


def _cmd_prepare(args: argparse.Namespace) -> int:
    config = _load(args.config)
    out = _output_folder(args, config)
    prepared = _prepare(args, args.config, config)
    written = _write(prepared, out)  # before any output: `| head` cannot stop the work
    print_reconciliation(prepared)
    print_written(written)
    return 0


def _args_demo(parser: argparse.ArgumentParser) -> None:
    parser.add_argument("--out", type=Path, default=Path("retain_demo"),
                        help="folder for the demo's outputs (default: ./retain_demo)")


def demo_config_path() -> Path:
    from retain.paths import DEMO_DIR

    path = DEMO_DIR / "retain.toml"
    if not path.is_file():
        raise RetainError(str(path), "the demo project file is missing",
                          "reinstall retain from its repository (demo_data/ holds the demo)")
    return path


def _cmd_demo(args: argparse.Namespace) -> int:
    from retain.publish.site import check_target

    config = _load(demo_config_path())
    out = _output_folder(args, config)
    check_target((out / "site").resolve())  # before any work
    prepared = _prepare(args, config.path, config)
    print_reconciliation(prepared, demo=True)
    print_written(_write(prepared, out))
    index = _build_site(args, prepared, out / "site")
    print(index)
    return 0


def _build_site(args: argparse.Namespace, prepared, out: Path) -> Path:  # noqa: ANN001
    """Run every model on the prepared table and write the site; return index.html's path."""
    from retain.run import build_from_config

    quiet = getattr(args, "quiet", False)

    index, run = build_from_config(prepared.config, out, prepared=prepared,
                                   progress=None if quiet else progress_line)
    skipped = [name for name, outcome in run.outcomes.items() if outcome.skipped]
    for name, outcome in run.outcomes.items():
        if not outcome.ok and not outcome.skipped:
            print(f"retain: warning: {name} failed and its page says why: {outcome.error}",
                  file=sys.stderr)
    if skipped and not quiet:
        print(f"retain: not set up in the project file (the overview says which key turns each "
              f"on): {', '.join(skipped)}", file=sys.stderr)
    return index


def _args_build(parser: argparse.ArgumentParser) -> None:
    _args_config(parser)
    parser.add_argument("--out", type=Path, default=None,
                        help="folder for the site (default: [output] dir in retain.toml, "
                             "then site/)")


def _cmd_build(args: argparse.Namespace) -> int:
    from retain.publish.site import check_target

    config = _load(args.config)
    out = _output_folder(args, config, "site")
    check_target(out.resolve())  # before preparing: a refused --out costs nothing
    prepared = _prepare(args, args.config, config)
    print(_build_site(args, prepared, out))
    return 0


register("check", "validate retain.toml and the event log; print the reconciliation",
         _args_config, _cmd_check)
register("prepare", "write the start-stop table, quarantine and reconciliation",
         _args_prepare, _cmd_prepare)
register("build", "run every model and write the static site; print the path of index.html",
         _args_build, _cmd_build)
register("demo", "run on the invented demo business (Quillfern) and build its site",
         _args_demo, _cmd_demo)


# ---------------------------------------------------------------------- main
def build_parser() -> argparse.ArgumentParser:
    common = argparse.ArgumentParser(add_help=False)
    common.add_argument("--debug", action="store_true", default=argparse.SUPPRESS,
                        help="show the traceback of an error")
    common.add_argument("--quiet", action="store_true", default=argparse.SUPPRESS,
                        help="no progress lines on stderr")
    parser = argparse.ArgumentParser(
        prog="retain", parents=[common],
        description="Survival analysis of a subscription business's event log.")
    parser.add_argument("--version", action="version", version=f"retain {__version__}")
    sub = parser.add_subparsers(dest="command", metavar="command")
    sub.required = True
    for cmd in COMMANDS.values():
        p = sub.add_parser(cmd.name, help=cmd.help, description=cmd.help, parents=[common])
        cmd.add_arguments(p)
        p.set_defaults(_run=cmd.run)
    return parser


def main(argv: Sequence[str] | None = None) -> int:
    """Run one command; return its exit code (0 ok, 2 error)."""
    parser = build_parser()
    args = parser.parse_args(list(argv) if argv is not None else None)
    debug = getattr(args, "debug", False)
    try:
        code = int(args._run(args) or 0)
        sys.stdout.flush()  # a reader that went away shows here, not at interpreter exit
        return code
    except BrokenPipeError:
        return _reader_gone()
    except RetainError as exc:
        if debug:
            traceback.print_exc()
        print(f"retain: {exc.message}", file=sys.stderr)
        return EXIT_ERROR
    except KeyboardInterrupt:
        print("retain: interrupted", file=sys.stderr)
        return 130
    except Exception as exc:  # a bug: still one line unless --debug
        if debug:
            traceback.print_exc()
        first = (str(exc).strip().splitlines() or [""])[0]
        print(f"retain: internal error ({type(exc).__name__}: {first}) -- this is a bug in "
              "retain; rerun with --debug and report the traceback", file=sys.stderr)
        return EXIT_ERROR


def _reader_gone() -> int:
    """stdout's reader closed it (``retain prepare ... | head``): end quietly.

    As the Python documentation's note on SIGPIPE advises, the rest of stdout goes
    to devnull so that the flush at exit does not raise again.
    """
    try:
        devnull = os.open(os.devnull, os.O_WRONLY)
        os.dup2(devnull, sys.stdout.fileno())
    except (OSError, ValueError):  # stdout without a file descriptor (captured in tests)
        pass
    return EXIT_BROKEN_PIPE


if __name__ == "__main__":  # pragma: no cover
    sys.exit(main())
