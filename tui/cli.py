"""The ``remnant`` command: headless verbs (fit, predict, show, demo --headless) and the workbench.

Exit status: 0 done; 2 bad input or usage (one ``error:`` line on stderr, no traceback);
1 an internal fault. Nothing heavy is imported at module level, so ``remnant --help``
answers at once: each command imports the engine (pandas, scikit-learn, LightGBM) itself.
"""

from __future__ import annotations

import argparse
import contextlib
import os
import sys
import time
from typing import IO, Any, NoReturn

from .caution import CAUTION
from .demo_app import demo_folder

DEFAULT_CHUNK_ROWS = 100_000
VERBOSE = ("log what the engine does to standard error (the workbench always writes a log file, named "
           "on its help screen)")


class UsageError(Exception):
    """Bad input the command line found itself (exit status 2); ``str(err)`` is the message."""



# ----------------------------------------------------------------------------- parser


class _Parser(argparse.ArgumentParser):
    """An argument parser whose usage errors are one ``error:`` line and exit status 2."""

    def error(self, message: str) -> NoReturn:
        """Print one error line naming the command's help, then exit with status 2."""
        self.exit(2, f"error: {message} (see '{self.prog} --help')\n")


class _Version(argparse.Action):
    """Print the installed version; looked up only when asked for."""

    def __init__(self, option_strings: list[str], dest: str = argparse.SUPPRESS, **kwargs: Any) -> None:
        super().__init__(option_strings, dest, nargs=0, default=argparse.SUPPRESS, **kwargs)

    def __call__(self, parser: argparse.ArgumentParser, *args: Any, **kwargs: Any) -> None:
        from importlib import metadata

        try:
            version = metadata.version("remnant")
        except metadata.PackageNotFoundError:
            version = "unknown (not installed)"
        sys.stdout.write(f"remnant {version}\n")
        parser.exit(0)


def _positive(text: str) -> int:
    try:
        value = int(text)
    except ValueError:
        raise argparse.ArgumentTypeError(f"{text!r} is not a whole number") from None
    if value < 1:
        raise argparse.ArgumentTypeError(f"must be at least 1, not {value}")
    return value


def _add_format(command: argparse.ArgumentParser) -> None:
    command.add_argument("--format", choices=("table", "csv"), default="table",
                         help="the stage table as aligned text (default) or as CSV")


_RAW = argparse.RawDescriptionHelpFormatter
_DEMO = """Open the workbench on the built-in demo data (refrigerated deliveries) with
its demo chain started. With --headless, fit the demo recipe without a screen
and print the stage table. With --multiclass, the multiclass demo instead: the
main cause of each delivery's delay (delay_causes.toml)."""
_EXPLORE = """Open the workbench on a CSV or Parquet file. Given a chain file (.chain),
open it read-only."""
_FIT = """Fit a TOML recipe without a screen, print the stage table and write the
chain file.

example:
  remnant fit houses.toml --data houses_2025.csv --out houses.chain"""
_PREDICT = """Predict every row of DATA with a chain file and write CSV: column 'prediction',
and 'probability' for a binary chain; one row per input row, in input order.
The data is read in chunks, so files larger than memory can be scored.
--id COL copies COL first; --id alone copies the chain's id column (the column
with a distinct value on every row that the chain found when it was fit).
With --each-stage, also 'after_1' .. 'after_N' (the prediction after each stage;
the probability for a binary chain) and, when DATA has the target column,
'residual' (target minus prediction; for a binary chain 1 or 0 minus the
probability).
A chain on the log link (loss poisson, gamma or tweedie) predicts the mean per unit
of exposure; a chain fit with an exposure column needs that column in DATA, and
--exposure COL multiplies each prediction by COL, giving the expected total of the
row (its 'residual' is the target minus the expected total on the chain's exposure).

example:
  remnant predict houses.chain new.parquet --id listing_id --out scores.csv
  remnant predict alarms.chain months.csv --exposure months_in_service"""
_EXPORT = """Write a chain file as one ONNX model, with its preprocessing, for any ONNX runtime.
The model is checked in onnxruntime against the chain's own predictions on probe
rows before it is written; the probe rows (inputs and expected outputs) are
written beside it as OUT.probe.csv, to check the model where it is deployed.
A chain on the log link gives the mean per unit of exposure; one fit with an
exposure column takes that column as one more input and gives each row's
expected total (as remnant predict --exposure COL).
Needs the optional extra: pip install 'remnant[onnx]'.

example:
  remnant export houses.chain --onnx houses.onnx"""
_SHOW = """Print a chain file's settings, its stage table (the scores stored when it was
saved), its schema and the coefficients of its linear stages (linear, ridge,
lasso, logistic) per unit of each feature. With --format csv, only the stage
table, as CSV."""
_SIGN = """Sign a chain file: add an HMAC-SHA256 over its manifest (which holds every
member's SHA-256), made with a key from --key-file or the REMNANT_SIGNING_KEY
environment variable. 'remnant verify', and 'show' or 'predict' with --key-file,
then refuse the file unless it carries a signature made with the same key. A
signature says a holder of the key signed these exact bytes; it does not make a
file safe, say who signed it, or when (see docs/untrusted-files.md)."""
_VERIFY = """Check a chain file's signature with a key from --key-file or the
REMNANT_SIGNING_KEY environment variable, then load it in full. Exit status 0
when it is signed with that key and loads; 2 otherwise."""


def build_parser() -> argparse.ArgumentParser:
    """Return the parser of the ``remnant`` command and its subcommands."""
    parser = _Parser(prog="remnant", description="Build residual chains: a start value, then stages each "
                     "fit to what the chain so far gets wrong.",
                     epilog="Run 'remnant COMMAND --help' for the options of a command.")
    parser.add_argument("--version", action=_Version, help="print the version and exit")
    parser.add_argument("-v", "--verbose", action="store_true", help=VERBOSE)
    commands = parser.add_subparsers(dest="command", metavar="COMMAND", required=True, parser_class=_Parser)
    _add_workbench_commands(commands)
    _add_headless_commands(commands)
    for command in commands.choices.values():  # also after the command; given there, it overrides nothing
        command.add_argument("-v", "--verbose", action="store_true", default=argparse.SUPPRESS, help=VERBOSE)
    return parser


def _add_workbench_commands(commands: Any) -> None:
    demo = commands.add_parser("demo", help="the workbench on the built-in delivery data", description=_DEMO,
                               formatter_class=_RAW)
    demo.add_argument("--headless", action="store_true", help="fit the demo recipe and print the stage table")
    demo.add_argument("--multiclass", action="store_true",
                      help="the multiclass demo: which cause delayed each delivery (delay_causes.toml)")
    _add_format(demo)
    demo.set_defaults(run=run_demo)
    explore = commands.add_parser("explore", help="the workbench on a CSV or Parquet file (or a chain file)",
                                  description=_EXPLORE, formatter_class=_RAW)
    explore.add_argument("data", metavar="DATA", help="a CSV or Parquet file, or a .chain file")
    explore.add_argument("--target", metavar="COL", help="the column to predict")
    explore.set_defaults(run=run_explore)


def _add_headless_commands(commands: Any) -> None:
    fit = commands.add_parser("fit", help="fit a recipe, print the stage table, write the chain file",
                              description=_FIT, formatter_class=_RAW)
    fit.add_argument("recipe", metavar="RECIPE", help="the TOML recipe")
    fit.add_argument("--data", metavar="DATA", help="fit on this CSV or Parquet file instead of the recipe's")
    fit.add_argument("--out", metavar="CHAIN", required=True,
                     help="the chain file to write (replaced only when the new one is complete; "
                          "'-' writes it to standard output and the stage table to standard error)")
    fit.add_argument("--cluster", metavar="ADDRESS",
                     help="fit on a Dask cluster: tcp://host:port, or local:N to start N local workers "
                          "(needs pip install 'remnant[dask]')")
    _add_format(fit)
    fit.set_defaults(run=run_fit)
    predict = commands.add_parser("predict", help="write predictions of a chain file as CSV",
                                  description=_PREDICT, formatter_class=_RAW)
    predict.add_argument("chain", metavar="CHAIN", help="a chain file written by 'remnant fit' or the workbench")
    predict.add_argument("data", metavar="DATA", help="a CSV or Parquet file with the chain's feature columns")
    predict.add_argument("--out", metavar="FILE", help="write here instead of to standard output ('-': standard output)")
    _add_key_file(predict, "refuse the chain file unless it is signed with the key in FILE")
    predict.add_argument("--id", metavar="COL", nargs="?", const="",
                         help="copy this column first into the output; --id alone copies the column the chain "
                              "found to name the rows (its id column)")
    predict.add_argument("--chunk-rows", metavar="N", type=_positive, default=DEFAULT_CHUNK_ROWS,
                         help=f"rows read at a time (default {DEFAULT_CHUNK_ROWS:,})")
    predict.add_argument("--each-stage", action="store_true",
                         help="also write the prediction after each stage, and the residual when DATA has the target")
    predict.add_argument("--exposure", metavar="COL",
                         help="multiply each prediction (per unit of exposure) by COL: expected totals "
                              "(log-link chains: poisson, gamma, tweedie)")
    predict.add_argument("--cluster", metavar="ADDRESS",
                         help="predict on a Dask cluster (tcp://host:port or local:N); --out is then a new "
                              "folder of Parquet parts with row_id and prediction")
    predict.set_defaults(run=run_predict)
    export = commands.add_parser("export", help="write a chain file as an ONNX model (and its probe file)",
                                 description=_EXPORT, formatter_class=_RAW)
    export.add_argument("chain", metavar="CHAIN", help="a chain file")
    export.add_argument("--onnx", metavar="OUT", required=True, help="the ONNX model to write (e.g. model.onnx)")
    export.set_defaults(run=run_export)
    show = commands.add_parser("show", help="print a chain file's stages, scores and schema", description=_SHOW,
                               formatter_class=_RAW)
    show.add_argument("chain", metavar="CHAIN", help="a chain file")
    _add_format(show)
    _add_key_file(show, "refuse the chain file unless it is signed with the key in FILE")
    show.set_defaults(run=run_show)
    for name, text, run, summary in (("sign", _SIGN, run_sign, "sign a chain file with a key (HMAC-SHA256)"),
                                     ("verify", _VERIFY, run_verify, "check a chain file's signature")):
        command = commands.add_parser(name, help=summary, description=text, formatter_class=_RAW)
        command.add_argument("chain", metavar="CHAIN", help="a chain file")
        _add_key_file(command, "read the key from FILE (default: the REMNANT_SIGNING_KEY environment variable)")
        command.set_defaults(run=run)


def _add_key_file(command: argparse.ArgumentParser, text: str) -> None:
    command.add_argument("--key-file", metavar="FILE", help=text)


# ----------------------------------------------------------------------------- main


def main(argv: list[str] | None = None) -> int:
    """Run the ``remnant`` command with ``argv`` (default: the process's arguments); return the exit status."""
    try:
        args = build_parser().parse_args(argv)
    except SystemExit as done:  # --help, --version and usage errors
        return done.code if isinstance(done.code, int) else 0
    return _run(args)


def _run(args: argparse.Namespace) -> int:
    import warnings

    from stages.errors import Cancelled, RemnantError

    shown: set[str] = set()

    def show_warning(message: Any, category: Any, *rest: Any, **kwargs: Any) -> None:
        line = _one_line(str(message))
        if line not in shown:
            shown.add(line)
            print(f"warning: {line}", file=sys.stderr)

    from .logs import log_to_stderr, stop_logging

    handler = log_to_stderr() if args.verbose else None
    try:
        with warnings.catch_warnings():
            warnings.showwarning = show_warning
            return args.run(args)
    except (RemnantError, Cancelled, UsageError) as err:
        _log().debug("%s", err, exc_info=err)  # with --verbose: the cause, for a damaged file and the like
        return _fail(str(err))
    except BrokenPipeError:  # the reader of standard output went away (e.g. `| head`)
        _silence_stdout()
        return 0
    except OSError as err:
        where = f"{err.filename}: " if err.filename else ""
        return _fail(f"{where}{err.strerror or err}")
    except KeyboardInterrupt:
        _fail("interrupted; nothing was written")
        return 130
    finally:
        stop_logging(handler)


def _log() -> Any:
    from .logs import logger

    return logger(__name__)


def _fail(message: str) -> int:
    print(f"error: {_one_line(message)}", file=sys.stderr)
    return 2


def _one_line(text: str) -> str:
    return " ".join(text.split()) or "(no message)"


def _silence_stdout() -> None:
    devnull = os.open(os.devnull, os.O_WRONLY)
    with contextlib.suppress(OSError, ValueError):
        os.dup2(devnull, sys.stdout.fileno())


# ----------------------------------------------------------------------------- helpers


def _same_file(a: str | os.PathLike, b: str | os.PathLike) -> bool:
    try:
        return os.path.samefile(a, b)
    except OSError:
        return os.path.realpath(a) == os.path.realpath(b)


def check_out(out: str, inputs: dict[str, str | os.PathLike | None]) -> None:
    """Raise UsageError when ``out`` is one of the inputs, exists and is not a regular file, or is in a
    folder that does not exist. ``-`` (standard output) always passes."""
    from stages.atomic import STDOUT, output_target

    if out == STDOUT:
        return
    for what, path in inputs.items():
        if path is not None and _same_file(out, path):
            raise UsageError(f"--out {out} is the {what}; choose another file (nothing was written)")
    if os.path.isdir(out):
        raise UsageError(f"--out {out} is a folder; give a file name")
    folder = os.path.dirname(os.path.abspath(out))
    if not os.path.isdir(folder):
        raise UsageError(f"--out {out}: the folder {os.path.dirname(out) or folder} does not exist")
    output_target(out, "--out", UsageError)


def _holding(out: str) -> Any:
    """Return the lock of ``out`` for the whole command (nothing to hold for standard output)."""
    from stages.atomic import STDOUT, OutputLock

    if out == STDOUT:
        return contextlib.nullcontext()
    return OutputLock(out, what="--out", error=UsageError)


def _key(args: argparse.Namespace, from_environment: bool) -> bytes | None:
    from stages.files.signing import read_key

    if getattr(args, "key_file", None) is None and not from_environment:
        return None
    return read_key(args.key_file, from_environment=from_environment)


class Progress:
    """Progress of a fit as one rewritten line on a terminal's stderr; silent elsewhere."""

    def __init__(self, stream: IO[str]) -> None:
        self.stream = stream
        self.active = stream.isatty()
        self.last = 0.0
        self.drawn = False

    def __call__(self, fraction: float, message: str = "") -> None:
        """Redraw the line at most ten times a second."""
        now = time.monotonic()
        if not self.active or (now - self.last < 0.1 and fraction < 1):
            return
        self.last = now
        width = max(20, _terminal_width() - 1)
        self.stream.write("\r" + f"{fraction * 100:3.0f}%  {message}"[:width].ljust(width))
        self.stream.flush()
        self.drawn = True

    def clear(self) -> None:
        """Remove the progress line, if one was drawn."""
        if self.drawn:
            self.stream.write("\r" + " " * (_terminal_width() - 1) + "\r")
            self.stream.flush()
            self.drawn = False


def _terminal_width() -> int:
    import shutil

    return shutil.get_terminal_size((80, 24)).columns


def print_table(table: Any, fmt: str, stream: IO[str] | None = None) -> None:
    """Print a stage table as aligned text or CSV, to ``stream`` (default stdout)."""
    from tui.table_text import format_csv, format_table

    out = sys.stdout if stream is None else stream
    out.write(format_csv(table) if fmt == "csv" else format_table(table))
    out.flush()


def _fit_with_progress(recipe: Any, data: str | None) -> Any:
    from stages.files.recipe import fit_recipe

    progress = Progress(sys.stderr)
    try:
        chain = fit_recipe(recipe, data=data, progress=progress)
    finally:
        progress.clear()
    for note in chain.notes:
        print(f"note: {_one_line(note)}", file=sys.stderr)
    for number, stage in enumerate(chain.stages, start=1):
        for note in stage.notes:
            print(f"note: stage {number} ({stage.kind}): {_one_line(note)}", file=sys.stderr)
    return chain


# ----------------------------------------------------------------------------- commands


def run_fit(args: argparse.Namespace) -> int:
    """Fit a recipe, write the chain file, print the stage table; return 0."""
    from stages.files import store
    from stages.files.recipe import read_recipe

    from .cli_cluster import cluster_address, fit_on_cluster

    recipe = read_recipe(args.recipe)
    address = cluster_address(args, recipe)
    inputs = {"recipe": args.recipe, "input data file": None if address else args.data or recipe.data_path}
    check_out(args.out, inputs)
    with _holding(args.out):  # a second `remnant fit` to the same --out is refused before it fits
        if address is not None:
            chain = fit_on_cluster(args, recipe, address)
        else:
            chain = _fit_with_progress(recipe, args.data)
            store.save(chain, args.out)
    to_stdout = args.out == "-"
    print_table(chain.table(), args.format, stream=sys.stderr if to_stdout else sys.stdout)
    print(CAUTION, file=sys.stderr)
    print(f"saved {'the chain file to standard output' if to_stdout else args.out} ({len(chain)} stages)",
          file=sys.stderr)
    return 0


def run_demo(args: argparse.Namespace) -> int:
    """Fit the demo recipe and print its table (--headless), or open the workbench on the demo."""
    folder = demo_folder()
    name = "delay_causes" if args.multiclass else "deliveries"
    recipe_path = folder / f"{name}.toml"
    if not args.headless:
        return _open_app(data_path=str(folder / f"{name}.csv"), recipe_path=str(recipe_path))
    from stages.files.recipe import read_recipe

    chain = _fit_with_progress(read_recipe(recipe_path), None)
    print_table(chain.table(), args.format)
    print(CAUTION, file=sys.stderr)
    return 0


def run_explore(args: argparse.Namespace) -> int:
    """Open the workbench on a data file, or read-only on a chain file."""
    import stat

    from stages.atomic import node_kind

    path = args.data
    if not os.path.exists(path):
        raise UsageError(f"{path}: no such file")
    if os.path.isdir(path):
        raise UsageError(f"{path}: is a folder, not a data file")
    mode = os.stat(path).st_mode
    if not stat.S_ISREG(mode):
        raise UsageError(f"{path}: is {node_kind(mode)}, not a regular file (remnant reads data only from regular files)")
    if _is_chain_file(path):
        if args.target:
            raise UsageError("--target is for data files; a chain file knows its target")
        return _open_app(chain_path=path)
    return _open_app(data_path=path, target=args.target)


def _is_chain_file(path: str) -> bool:
    if path.lower().endswith(".chain"):
        return True
    with open(path, "rb") as handle:
        return handle.read(4) == b"PK\x03\x04"


def _open_app(**kwargs: Any) -> int:
    try:
        from tui.app import run
    except ImportError as err:
        print(f"error: the workbench cannot start ({err})", file=sys.stderr)
        return 1
    return int(run(**kwargs) or 0)


def run_show(args: argparse.Namespace) -> int:
    """Print a chain file's settings, stage table and schema; return 0."""
    from stages.files import store
    from stages.report.table import fitted_rows
    from tui.table_text import (
        describe_chain,
        describe_coefficients,
        describe_schema,
        describe_steps,
    )

    fitted = store.load(args.chain, key=_key(args, from_environment=False))
    table = fitted_rows(fitted)
    if args.format == "csv":
        print_table(table, "csv")
        return 0
    sys.stdout.write(describe_chain(args.chain, fitted) + "\n")
    print_table(table, "table")
    if fitted.stages:
        sys.stdout.write("\n" + describe_steps(fitted))
    sys.stdout.write("\n" + describe_schema(fitted))
    coefficients = describe_coefficients(fitted)
    if coefficients:
        sys.stdout.write("\n" + coefficients)
    return 0


def run_predict(args: argparse.Namespace) -> int:
    """Write predictions of a chain file for every row of a data file; return 0."""
    from stages.files import store
    from stages.loglink import is_log_link
    from tui.predicting import write_predictions

    if args.cluster:
        from .cli_cluster import predict_on_cluster

        return predict_on_cluster(args, args.cluster)
    out = None if args.out in (None, "-") else args.out
    if out is not None:
        check_out(out, {"input data file": args.data, "chain file": args.chain})
    with _holding(out or "-"):
        fitted = store.load(args.chain, key=_key(args, from_environment=False))
        id_column = args.id
        if id_column == "":
            id_column = fitted.schema.id_column
            if not id_column:
                raise UsageError(f"--id: {args.chain} names no id column (none had a distinct value on every row); "
                                 "name one: --id COL")
        if args.exposure is not None and not is_log_link(fitted.loss):
            raise UsageError(f"--exposure is for chains on the log link (poisson, gamma, tweedie); {args.chain} "
                             f"has loss {fitted.loss.name!r}")
        write_predictions(fitted, args.data, out, id_column=id_column, chunk_rows=args.chunk_rows,
                          each_stage=args.each_stage, exposure=args.exposure)
    return 0


def run_sign(args: argparse.Namespace) -> int:
    """Sign a chain file in place with the key; return 0."""
    from stages.files.signing import ALGORITHM, read_key, sign

    sign(args.chain, read_key(args.key_file, from_environment=True))
    print(f"signed {args.chain} ({ALGORITHM} over its manifest)", file=sys.stderr)
    return 0


def run_verify(args: argparse.Namespace) -> int:
    """Check a chain file's signature with the key and load it; return 0 when both succeed."""
    from stages.files.signing import read_key, verify

    fitted = verify(args.chain, read_key(args.key_file, from_environment=True))
    print(f"{args.chain}: the signature matches the key; {len(fitted.stages)} stages load")
    return 0


def run_export(args: argparse.Namespace) -> int:
    """Write a chain file as an ONNX model and its probe file, print what was measured; return 0."""
    from stages.files import store

    if args.onnx == "-":
        raise UsageError("--onnx needs a file name: the model is written with its probe file beside it")
    if _same_file(args.onnx, args.chain):
        raise UsageError(f"--onnx {args.onnx} is the chain file; choose another file (nothing was written)")
    report = store.load(args.chain).to_onnx(args.onnx)
    for line in report.lines():
        print(line)
    print("caution: check the model where it runs against the probe file before relying on it", file=sys.stderr)
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
