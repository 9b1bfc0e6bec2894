"""The TOML recipe: a chain without its fitted parts (data, columns, validation, loss, stages).

``read_recipe`` / ``parse_recipe`` turn a recipe into a checked ``Recipe``; every mistake is a
``RecipeError`` naming the recipe file and the line (``houses.toml line 12: unknown key
'shrinkge' in [[stage]] ...``). ``fit_recipe`` replays a recipe; ``recipe_to_toml`` and
``chain_to_recipe`` write one back, so that a replay on the same data and seed gives the same
chain. TOML has no null: a stage parameter written as the string ``"none"`` means Python's
``None`` (``params = { max_depth = "none" }``), and ``None`` is written that way. Unless it is
given, the ``[validation]`` seed of a scheme that draws rows is the ``[chain]`` seed.
"""

from __future__ import annotations

import contextlib
import difflib
import os
import re
import stat
import threading
import tomllib
from collections.abc import Callable, Iterator
from dataclasses import dataclass, field
from pathlib import Path
from typing import TYPE_CHECKING, Any

from .. import parsing
from ..data import TASKS
from ..errors import RecipeError, RemnantError, StageSpecError, ValidationSpecError
from ..kinds.base import ProgressFn
from ..limits import MAX_NESTING, MAX_SEED, MAX_STAGES
from ..parsing import ENTRY_KEYS, shown
from ..row_weights import GIVEN
from ..spec import StageSpec
from ..threads import check_threads
from ..validation import Holdout, ValidationSpec
from .recipe_cluster import ClusterSettings, cluster_of, parse_cluster
from .recipe_steps import Audition, parse_auditions, replay
from .toml_text import KeyLines, toml_key, toml_value

if TYPE_CHECKING:
    import pandas as pd

    from ..chain import Chain

TABLES = ("data", "chain", "validation", "stage", "audition", "cluster")
DATA_KEYS = ("path", "target", "ignore", "features", "task", "positive", "dates", "weight", "exposure")
CHAIN_KEYS = ("loss", "seed", "threshold", "power", "threads")
MAX_RECIPE_BYTES = 16 * 1024**2
_SHOWN_TABLES = "[data], [chain], [validation], [[stage]], [[audition]], [cluster]"


@dataclass(frozen=True)
class Recipe:
    """A checked recipe. ``stages`` holds (spec, repeat) entries; ``data_path`` is resolved
    against the recipe's folder (None when the recipe names no file)."""

    data_path: Path | None
    target: str
    validation: ValidationSpec
    stages: tuple[tuple[StageSpec, int], ...]
    ignore: tuple[str, ...] = ()
    features: tuple[str, ...] | None = None
    task: str | None = None
    positive: str | None = None
    loss: str | None = None
    seed: int = 0
    threshold: float = 0.5
    threads: int | None = None                                # None: the usable cores
    source: str = "recipe"
    lines: KeyLines | None = field(default=None, compare=False, repr=False)
    patience: dict[int, int] = field(default_factory=dict)   # stage entry -> patience (grow)
    auditions: tuple[Audition, ...] = ()
    dates: tuple[tuple[str, tuple[str, ...]], ...] = ()      # date column -> parts that become features
    weight: str | None = None                                # the column of row weights
    exposure: str | None = None                              # the column of exposures (log-link losses)
    power: float | None = None                               # the tweedie loss's power
    cluster: ClusterSettings | None = None                    # the [cluster] table: fit on a Dask cluster

    @property
    def name(self) -> str:
        """Return the recipe's file name, as messages show it."""
        return Path(self.source).name or self.source

    def specs(self) -> list[StageSpec]:
        """Return every stage spec in order, with each entry repeated ``repeat`` times."""
        return [spec for spec, repeat in self.stages for _ in range(repeat)]

    def where(self, table: str | None, index: int = 0, key: str | None = None) -> str:
        """Return ``"name line N"`` for a key of the recipe (just the name when the line is unknown)."""
        number = self.lines.line(table, index, key) if self.lines else None
        return f"{self.name} line {number}" if number else self.name


# ----------------------------------------------------------------------------- reading


def read_recipe(path: str | os.PathLike) -> Recipe:
    """Return the checked recipe in the TOML file at ``path``; raise RecipeError for any mistake."""
    file = Path(os.fspath(path))
    name = file.name or os.fspath(path)
    try:
        mode = file.stat().st_mode
        if not stat.S_ISREG(mode) and not stat.S_ISDIR(mode):
            from ..atomic import node_kind

            raise RecipeError(f"{name}: is {node_kind(mode)}, not a regular file (remnant reads recipes only "
                              "from regular files)")
        if file.stat().st_size > MAX_RECIPE_BYTES:
            raise RecipeError(f"{name}: is larger than {MAX_RECIPE_BYTES // 1024**2} MiB; a recipe is a short text")
        raw = file.read_bytes()
    except FileNotFoundError:
        raise RecipeError(f"{name}: no such file") from None
    except IsADirectoryError:
        raise RecipeError(f"{name}: is a folder, not a recipe file") from None
    except OSError as err:
        raise RecipeError(f"{name}: cannot be read ({err.strerror or err})") from None
    try:
        text = raw.decode("utf-8-sig")
    except UnicodeDecodeError as err:
        raise RecipeError(f"{name}: the text is not UTF-8 (byte offset {err.start}); save it as UTF-8") from None
    return parse_recipe(text, file.resolve().parent, source=os.fspath(path))


def parse_recipe(text: str, base_dir: str | os.PathLike = ".", source: str = "recipe") -> Recipe:
    """Return the checked recipe in ``text``; ``base_dir`` is the folder data paths are relative to."""
    probe = Recipe(None, "", Holdout(), (), source=source, lines=KeyLines(text))
    try:
        doc = tomllib.loads(text)
    except tomllib.TOMLDecodeError as err:
        raise RecipeError(_syntax_message(probe.name, err)) from None
    except RecursionError:
        raise RecipeError(f"{probe.name}: values are nested too deeply to read "
                          f"(at most {MAX_NESTING} levels are used)") from None
    reader = _Reader(probe)
    reader.check_top(doc)
    data = reader.table(doc, "data")
    reader.check_keys(data, "data", 0, DATA_KEYS)
    chain = reader.table(doc, "chain")
    reader.check_keys(chain, "chain", 0, CHAIN_KEYS)
    settings = reader.data_settings(data, Path(base_dir))
    with reader.at("chain"):
        seed = parsing.whole_value(chain, "seed", 0)
    if not 0 <= seed <= MAX_SEED:
        raise reader.fail(f"seed must be a whole number from 0 to {MAX_SEED:,}, not {seed:,}", "chain", 0, "seed")
    with reader.at("chain"):
        loss = parsing.text_value(chain, "loss")
        threshold = parsing.number_value(chain, "threshold", 0.5)
    if not 0 < threshold < 1:
        raise reader.fail(f"threshold must be between 0 and 1, not {threshold:g}", "chain", 0, "threshold")
    power = reader.power(chain, loss)
    try:
        threads = check_threads(chain.get("threads"))
    except StageSpecError as err:
        raise reader.fail(str(err), "chain", 0, "threads") from None
    table = reader.table(doc, "validation")
    with reader.at("validation"):
        validation = parsing.validation_spec(table, seed=seed)
    entries = reader.stages(doc, settings["task"])
    total = sum(entry.repeat for entry in entries)
    if total > MAX_STAGES:
        raise reader.fail(f"the recipe asks for {total:,} stages; a chain holds at most {MAX_STAGES:,}", "stage")
    auditions = parse_auditions(doc.get("audition"), lambda i, key: probe.where("audition", i, key), len(entries),
                                settings["task"])
    cluster = parse_cluster(doc.get("cluster"), lambda problem, key: reader.fail(problem, "cluster", 0, key))
    return Recipe(validation=validation, stages=tuple((e.spec, e.repeat) for e in entries), loss=loss, seed=seed,
                  threshold=threshold, power=power, threads=threads, source=source, lines=probe.lines,
                  auditions=auditions, cluster=cluster,
                  patience={i: e.patience for i, e in enumerate(entries) if e.patience is not None}, **settings)


def _syntax_message(name: str, err: tomllib.TOMLDecodeError) -> str:
    text = str(err)
    found = re.search(r"\(at line (\d+), column (\d+)\)", text)
    if not found:
        return f"{name}: not valid TOML ({text})"
    problem = text[: found.start()].strip()
    return f"{name} line {found.group(1)}: not valid TOML: {problem} (column {found.group(2)})"


class _Reader:
    """Checks one parsed recipe, raising RecipeError with the line of the offending key."""

    def __init__(self, recipe: Recipe) -> None:
        self.recipe = recipe

    def fail(self, problem: str, table: str | None, index: int = 0, key: str | None = None) -> RecipeError:
        return RecipeError(f"{self.recipe.where(table, index, key)}: {problem}")

    def check_top(self, doc: dict[str, Any]) -> None:
        for key, value in doc.items():
            if key in TABLES:
                continue
            if isinstance(value, dict):
                what = f"unknown table [{key}]"
            elif isinstance(value, list) and value and all(isinstance(v, dict) for v in value):
                what = f"unknown table [[{key}]]"
            else:
                what = f"unknown key {key!r} outside any table"
            raise self.fail(f"{what} (tables: {_SHOWN_TABLES})", key if isinstance(value, dict | list) else None,
                            0, None if isinstance(value, dict | list) else key)

    def table(self, doc: dict[str, Any], name: str) -> dict[str, Any]:
        value = doc.get(name, {})
        if not isinstance(value, dict):
            raise self.fail(f"{name} must be a table, written [{name}]", name)
        return value

    @contextlib.contextmanager
    def at(self, table: str, index: int = 0) -> Iterator[None]:
        """Turn a mistake found inside into a RecipeError at the line of the key it names."""
        try:
            yield
        except (StageSpecError, ValidationSpecError) as err:
            raise self.fail(str(err), table, index, err.key) from None

    def check_keys(self, table: dict[str, Any], name: str, index: int, known: tuple[str, ...]) -> None:
        shown_name = f"[[{name}]]" if name == "stage" else f"[{name}]"
        with self.at(name, index):
            parsing.check_keys(table, known, shown_name)

    def data_settings(self, data: dict[str, Any], base_dir: Path) -> dict[str, Any]:
        with self.at("data"):
            path = parsing.text_value(data, "path")
            target = parsing.text_value(data, "target")
        if target is None:
            raise self.fail("[data] has no 'target' (the column to predict)", "data")
        with self.at("data"):
            task = parsing.text_value(data, "task")
        if task is not None and task not in TASKS:
            raise self.fail(f"task must be 'regression', 'binary' or 'multiclass', not {task!r}", "data", 0, "task")
        positive = data.get("positive")
        if positive is not None and (isinstance(positive, dict | list) or not isinstance(positive, str | int | bool)):
            raise self.fail(f"positive must be a class label, not {shown(positive)}", "data", 0, "positive")
        if isinstance(positive, bool):
            positive = "true" if positive else "false"
        with self.at("data"):
            ignore = parsing.names_value(data, "ignore") or ()
            features = parsing.names_value(data, "features")
            weight = parsing.text_value(data, "weight")
            exposure = parsing.text_value(data, "exposure")
        for key, column in (("weight", weight), ("exposure", exposure)):
            if column is not None and column == target:
                raise self.fail(f"{key} {column!r} is the target; a {key} column is another column", "data", 0, key)
        if weight is not None and weight == exposure:
            raise self.fail(f"weight and exposure both name {weight!r}; they are two columns", "data", 0, "exposure")
        return {
            "weight": weight, "exposure": exposure,
            "data_path": None if path is None else base_dir / path,
            "target": target, "task": task,
            "positive": None if positive is None else str(positive),
            "ignore": ignore, "features": features, "dates": self.dates(data),
        }

    def power(self, chain: dict[str, Any], loss: str | None) -> float | None:
        """Return ``[chain] power``: a number strictly between 1 and 2, for the tweedie loss only."""
        if "power" not in chain:
            return None
        value = chain["power"]
        if loss != "tweedie":
            raise self.fail(f"power is for loss = \"tweedie\" only (this recipe's loss is {shown(loss or 'the default')})",
                            "chain", 0, "power")
        if isinstance(value, bool) or not isinstance(value, int | float) or not 1 < value < 2:
            raise self.fail(f"power must be a number strictly between 1 and 2, not {shown(value)}", "chain", 0, "power")
        return float(value)

    def dates(self, data: dict[str, Any]) -> tuple[tuple[str, tuple[str, ...]], ...]:
        """Return ``[data] dates``: each date column with the parts of it that become features."""
        from ..dates import DATE_PARTS

        value = data.get("dates", {})
        example = 'dates = { placed_at = ["hour", "day_of_week"] }'
        if not isinstance(value, dict):
            raise self.fail(f"dates must be a table such as {example}, not {shown(value)}", "data", 0, "dates")
        out = []
        for column, parts in value.items():
            if not isinstance(parts, list) or not parts or not all(isinstance(p, str) for p in parts):
                raise self.fail(f"dates: {column!r} must list its parts in quotes, such as {example}", "data", 0,
                                "dates")
            unknown = [p for p in parts if p not in DATE_PARTS]
            if unknown:
                raise self.fail(f"dates: unknown part {unknown[0]!r} of {column!r} (parts: {', '.join(DATE_PARTS)})",
                                "data", 0, "dates")
            out.append((column, tuple(parts)))
        return tuple(out)

    def stages(self, doc: dict[str, Any], task: str | None) -> list[parsing.StageEntry]:
        entries = doc.get("stage")
        if entries is None or entries == []:
            raise self.fail("the recipe has no [[stage]] (a chain needs at least one stage)", None)
        if not isinstance(entries, list) or not all(isinstance(e, dict) for e in entries):
            raise self.fail("stages must be written [[stage]], one table per stage", "stage")
        found = []
        for i, entry in enumerate(entries):
            with self.at("stage", i):
                found.append(parsing.stage_entry(entry, task or "regression", keys=ENTRY_KEYS, toml=True))
        return found


# ----------------------------------------------------------------------------- writing

def recipe_to_toml(recipe: Recipe, base_dir: str | os.PathLike | None = None) -> str:
    """Return the TOML text of ``recipe``; the data path is written relative to ``base_dir``
    (the current folder by default) when it can be."""
    out = ["# remnant recipe: replay with `remnant fit RECIPE --out CHAIN`", "", "[data]"]
    if recipe.data_path is not None:
        out.append(f"path = {toml_value(_relative(recipe.data_path, base_dir))}")
    else:
        out.append('# path = "data.csv"  (not known: set it here or pass --data)')
    binary = recipe.task == "binary"
    data: dict[str, Any] = {"target": recipe.target, "ignore": list(recipe.ignore), "features": recipe.features,
                            "task": recipe.task, "positive": recipe.positive if binary else None,
                            "dates": {column: list(parts) for column, parts in recipe.dates} or None,
                            "weight": recipe.weight, "exposure": recipe.exposure}
    out += _pairs({k: v for k, v in data.items() if v is not None and v != []})
    out += ["", "[chain]"]
    chain = {"loss": recipe.loss, "seed": recipe.seed, "threshold": recipe.threshold if binary else None,
             "power": recipe.power if recipe.loss == "tweedie" else None,
             "threads": recipe.threads}
    out += _pairs({k: v for k, v in chain.items() if v is not None})
    validation = recipe.validation.to_dict()
    if not binary and validation.get("stratify") is True:
        del validation["stratify"]  # only a binary target is stratified: the default says nothing here
    out += ["", "[validation]", *_pairs(validation)]
    if recipe.cluster is not None:
        out += ["", "[cluster]", *_pairs(recipe.cluster.to_dict())]
    for i, (spec, repeat) in enumerate(recipe.stages):
        entry = spec.to_dict()
        if "params" in entry:
            entry["params"] = parsing.to_toml(entry["params"])
        if repeat > 1:
            entry["repeat"] = repeat
        if i in recipe.patience:
            entry["patience"] = recipe.patience[i]
        out += ["", "[[stage]]", *_pairs(entry)]
    for audition in recipe.auditions:
        settings = audition.to_dict()
        candidates = settings.pop("candidate")
        out += ["", "[[audition]]", *_pairs(settings)]
        for candidate in candidates:
            if "params" in candidate:
                candidate["params"] = parsing.to_toml(candidate["params"])
            out += ["[[audition.candidate]]", *_pairs(candidate)]
    return "\n".join(out) + "\n"


def _pairs(values: dict[str, Any]) -> list[str]:
    return [f"{toml_key(k)} = {toml_value(list(v) if isinstance(v, tuple) else v)}" for k, v in values.items()]


def _relative(path: str | os.PathLike, base_dir: str | os.PathLike | None) -> str:
    """Return ``path`` relative to ``base_dir`` (default: the current folder), else absolute."""
    absolute = Path(os.path.abspath(os.fspath(path)))
    try:
        return Path(os.path.relpath(absolute, os.path.abspath(base_dir or os.curdir))).as_posix()
    except ValueError:  # another drive on Windows
        return absolute.as_posix()


def recipe_of_chain(chain: Chain) -> Recipe:
    """Return the recipe of a live chain, stages added by hand included; consecutive identical
    specs become one entry with ``repeat``."""
    rows = {key: value for key, value in chain.row_settings().items() if value != GIVEN}
    used = set(chain.validation.columns_used) | {rows.get("weight"), rows.get("exposure")}
    schema = chain.schema
    folded: list[list[Any]] = []
    for spec in chain.specs():
        if folded and folded[-1][0] == spec:
            folded[-1][1] += 1
        else:
            folded.append([spec, 1])
    path = chain.data_path or (None if chain.source == "frame" else chain.source)
    return Recipe(
        data_path=None if path is None else Path(path), target=schema.target, validation=chain.validation,
        stages=tuple((spec, n) for spec, n in folded), ignore=tuple(c for c in chain.ignore if c not in used),
        features=None if chain.prepared.features_inferred else tuple(schema.names), task=schema.task,
        positive=schema.positive_class, loss=chain.loss.name, seed=chain.seed, threshold=chain.threshold,
        dates=tuple(schema.dates().items()), weight=rows.get("weight"), exposure=rows.get("exposure"),
        power=rows.get("power"), threads=chain.threads, cluster=cluster_of(chain),
    )


def chain_to_recipe(chain: Chain, base_dir: str | os.PathLike | None = None) -> str:
    """Return the TOML recipe that refits ``chain`` from its data (path relative to ``base_dir``,
    the current folder by default)."""
    return recipe_to_toml(recipe_of_chain(chain), base_dir)


# ----------------------------------------------------------------------------- replaying


def fit_recipe(recipe_or_path: Recipe | str | os.PathLike, data: str | os.PathLike | pd.DataFrame | None = None,
               *, cancel: threading.Event | None = None, progress: ProgressFn | None = None,
               on_stage: Callable[[Chain], None] | None = None) -> Chain:
    """Return the chain a recipe describes, fitted; ``data`` (a file or a DataFrame) replaces its data path.

    ``on_stage(chain)`` is called after every stage is committed (a screen can draw it).
    """
    recipe = recipe_or_path if isinstance(recipe_or_path, Recipe) else read_recipe(recipe_or_path)
    chain = build_chain(recipe, data)
    replay(chain, recipe, cancel=cancel, progress=progress, on_stage=on_stage)
    return chain


def build_chain(recipe: Recipe, data: str | os.PathLike | pd.DataFrame | None = None) -> Chain:
    """Return the recipe's chain with no stages yet: its data, columns, validation and loss checked."""
    from ..chain import Chain
    from ..data import load_frame

    source = data if data is not None else recipe.data_path
    if source is None:
        raise RecipeError(f"{recipe.where('data')}: [data] has no 'path' (name the data file there or pass --data)")
    frame, name = load_frame(source)
    _check_columns(recipe, [str(c) for c in frame.columns], name)
    data_path = os.fspath(source) if isinstance(source, str | os.PathLike) else None
    try:
        chain = Chain(frame, recipe.target, recipe.validation, recipe.loss, seed=recipe.seed,
                      ignore=recipe.ignore, features=None if recipe.features is None else list(recipe.features),
                      task=recipe.task, positive=recipe.positive, threshold=recipe.threshold, source=name,
                      data_path=data_path, dates={column: list(parts) for column, parts in recipe.dates},
                      weight=recipe.weight, exposure=recipe.exposure, power=recipe.power, threads=recipe.threads)
    except ValidationSpecError as err:
        raise RecipeError(f"{recipe.where('validation')}: {err}") from None
    except StageSpecError as err:
        raise RecipeError(f"{recipe.where('chain', 0, 'loss')}: {err}") from None
    _check_stage_features(recipe, chain)
    return chain


def _check_columns(recipe: Recipe, columns: list[str], data_name: str) -> None:
    """Raise RecipeError, with the recipe line, for a column the recipe names that the data lacks."""
    named = [("target", recipe.target)] + [("ignore", c) for c in recipe.ignore]
    named += [("features", c) for c in recipe.features or () if c not in _derived_names(recipe)]
    named += [("dates", c) for c, _ in recipe.dates]
    named += [("column", c) for c in recipe.validation.columns_used]
    named += [(key, c) for key, c in (("weight", recipe.weight), ("exposure", recipe.exposure)) if c is not None]
    for key, column in named:
        if column in columns:
            continue
        table = "validation" if key == "column" else "data"
        close = difflib.get_close_matches(column, columns, n=1)
        hint = f" (did you mean {close[0]!r}?)" if close else ""
        raise RecipeError(f"{recipe.where(table, 0, key)}: {key} {column!r} is not a column of {data_name}{hint}")


def _derived_names(recipe: Recipe) -> set[str]:
    from ..dates import derived_name

    return {derived_name(column, part) for column, parts in recipe.dates for part in parts}


def _check_stage_features(recipe: Recipe, chain: Chain) -> None:
    for i, (spec, _) in enumerate(recipe.stages):
        try:
            chain.schema.index_of(spec.features)
        except RemnantError as err:
            raise RecipeError(f"{recipe.where('stage', i, 'features')}: [[stage]] {spec.kind!r}: {err}") from None
