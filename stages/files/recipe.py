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

import difflib
import os
import re
import stat
import threading
import tomllib
from collections.abc import Callable
from dataclasses import dataclass, field, fields
from pathlib import Path
from typing import TYPE_CHECKING, Any

from ..errors import RecipeError, RemnantError, StageSpecError, ValidationSpecError
from ..kinds.base import ProgressFn
from ..limits import MAX_NESTING, MAX_REPEAT, MAX_SEED, MAX_STAGES
from ..spec import StageSpec
from ..validation import SCHEMES, ValidationSpec, spec_from_dict
from .recipe_steps import Audition, parse_auditions, replay
from .toml_text import KeyLines, toml_key, toml_value

if TYPE_CHECKING:
    import pandas as pd

    from ..chain import Chain

TABLES = ("data", "chain", "validation", "stage", "audition")
DATA_KEYS = ("path", "target", "ignore", "features", "task", "positive")
CHAIN_KEYS = ("loss", "seed", "threshold")
STAGE_KEYS = ("kind", "shrinkage", "features", "params", "repeat", "patience")
TASKS = ("regression", "binary")
NONE_TEXT = "none"
MAX_RECIPE_BYTES = 16 * 1024**2
_SHOWN_TABLES = "[data], [chain], [validation], [[stage]], [[audition]]"


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
    source: str = "recipe"
    lines: KeyLines | None = field(default=None, compare=False, repr=False)
    patience: dict[int, int] = field(default_factory=dict)   # stage entry -> patience (grow)
    auditions: tuple[Audition, ...] = ()

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
    probe = Recipe(None, "", SCHEMES["holdout"](), (), source=source, lines=KeyLines(text))
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
    seed = reader.integer(chain, "chain", 0, "seed", 0)
    if not 0 <= seed <= MAX_SEED:
        raise reader.fail(f"seed must be a whole number from 0 to {MAX_SEED:,}, not {seed:,}", "chain", 0, "seed")
    loss = reader.text(chain, "chain", 0, "loss")
    threshold = reader.number(chain, "chain", 0, "threshold", 0.5)
    if not 0 < threshold < 1:
        raise reader.fail(f"threshold must be between 0 and 1, not {threshold:g}", "chain", 0, "threshold")
    validation = reader.validation(reader.table(doc, "validation"), seed)
    stages = reader.stages(doc, settings["task"])
    total = sum(repeat for _, repeat in stages)
    if total > MAX_STAGES:
        raise reader.fail(f"the recipe asks for {total:,} stages; a chain holds at most {MAX_STAGES:,}", "stage")
    patience = reader.patience(doc)
    auditions = parse_auditions(doc.get("audition"), lambda i, key: probe.where("audition", i, key), len(stages),
                                settings["task"])
    return Recipe(validation=validation, stages=stages, loss=loss, seed=seed, threshold=threshold,
                  source=source, lines=probe.lines, patience=patience, auditions=auditions, **settings)


def _syntax_message(name: str, err: tomllib.TOMLDecodeError) -> str:
    text = str(err)
    found = re.search(r"\(at line (\d+), column (\d+)\)", text)
    if not found:
        return f"{name}: not valid TOML ({text})"
    problem = text[: found.start()].strip()
    return f"{name} line {found.group(1)}: not valid TOML: {problem} (column {found.group(2)})"


def _shown(value: Any) -> str:
    try:
        return toml_value(value)
    except RecipeError:
        return repr(value)


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

    def check_keys(self, table: dict[str, Any], name: str, index: int, known: tuple[str, ...]) -> None:
        shown = f"[[{name}]]" if name == "stage" else f"[{name}]"
        for key in table:
            if key not in known:
                raise self.fail(f"unknown key {key!r} in {shown} (keys: {', '.join(known)})", name, index, key)

    def text(self, table: dict[str, Any], name: str, index: int, key: str, default: Any = None) -> Any:
        value = table.get(key, default)
        if value is not default and not isinstance(value, str):
            raise self.fail(f"{key} must be text in quotes, not {_shown(value)}", name, index, key)
        return value

    def names(self, table: dict[str, Any], name: str, index: int, key: str) -> tuple[str, ...] | None:
        value = table.get(key)
        if value is None:
            return None
        if not isinstance(value, list) or not all(isinstance(v, str) for v in value):
            raise self.fail(f"{key} must be a list of column names in quotes, not {_shown(value)}", name, index, key)
        return tuple(value)

    def integer(self, table: dict[str, Any], name: str, index: int, key: str, default: int) -> int:
        value = table.get(key, default)
        if isinstance(value, bool) or not isinstance(value, int):
            raise self.fail(f"{key} must be a whole number, not {_shown(value)}", name, index, key)
        return value

    def number(self, table: dict[str, Any], name: str, index: int, key: str, default: float) -> float:
        value = table.get(key, default)
        if isinstance(value, bool) or not isinstance(value, int | float):
            raise self.fail(f"{key} must be a number, not {_shown(value)}", name, index, key)
        return float(value)

    def data_settings(self, data: dict[str, Any], base_dir: Path) -> dict[str, Any]:
        path = self.text(data, "data", 0, "path")
        target = self.text(data, "data", 0, "target")
        if target is None:
            raise self.fail("[data] has no 'target' (the column to predict)", "data")
        task = self.text(data, "data", 0, "task")
        if task is not None and task not in TASKS:
            raise self.fail(f"task must be 'regression' or 'binary', not {task!r}", "data", 0, "task")
        positive = data.get("positive")
        if positive is not None and (isinstance(positive, dict | list) or not isinstance(positive, str | int | bool)):
            raise self.fail(f"positive must be a class label, not {_shown(positive)}", "data", 0, "positive")
        if isinstance(positive, bool):
            positive = "true" if positive else "false"
        return {
            "data_path": None if path is None else base_dir / path,
            "target": target, "task": task,
            "positive": None if positive is None else str(positive),
            "ignore": self.names(data, "data", 0, "ignore") or (),
            "features": self.names(data, "data", 0, "features"),
        }

    def validation(self, table: dict[str, Any], seed: int) -> ValidationSpec:
        values = dict(table)
        scheme = values.get("scheme", "holdout")
        if scheme not in SCHEMES:
            raise self.fail(f"unknown validation scheme {_shown(scheme)} (schemes: {', '.join(SCHEMES)})",
                            "validation", 0, "scheme")
        known = ("scheme", *(f.name for f in fields(SCHEMES[scheme])))
        for key in values:
            if key not in known:
                raise self.fail(f"unknown key {key!r} in [validation] for scheme {scheme!r} (keys: {', '.join(known)})",
                                "validation", 0, key)
        if "seed" in known and "seed" not in values:
            values["seed"] = seed
        try:
            return spec_from_dict(values)
        except (ValidationSpecError, TypeError) as err:
            culprit = next((k for k in sorted(values, key=len, reverse=True) if re.search(rf"\b{k}\b", str(err))), None)
            raise self.fail(str(err), "validation", 0, culprit) from None

    def stages(self, doc: dict[str, Any], task: str | None) -> tuple[tuple[StageSpec, int], ...]:
        entries = doc.get("stage")
        if entries is None or entries == []:
            raise self.fail("the recipe has no [[stage]] (a chain needs at least one stage)", None)
        if not isinstance(entries, list) or not all(isinstance(e, dict) for e in entries):
            raise self.fail("stages must be written [[stage]], one table per stage", "stage")
        return tuple(self.stage(entry, i, task) for i, entry in enumerate(entries))

    def stage(self, entry: dict[str, Any], i: int, task: str | None) -> tuple[StageSpec, int]:
        self.check_keys(entry, "stage", i, STAGE_KEYS)
        kind = self.text(entry, "stage", i, "kind")
        if kind is None:
            raise self.fail(f"[[stage]] number {i + 1} has no 'kind'", "stage", i)
        from ..kinds import get_kind

        try:
            found = get_kind(kind)
        except StageSpecError as err:
            raise self.fail(str(err), "stage", i, "kind") from None
        params = entry.get("params", {})
        if not isinstance(params, dict):
            raise self.fail(f"params must be a table such as {{ max_depth = 3 }}, not {_shown(params)}", "stage", i, "params")
        if _depth(params) > MAX_NESTING:
            raise self.fail(f"params are nested more than {MAX_NESTING} levels deep", "stage", i, "params")
        try:
            spec = StageSpec(kind, self.number(entry, "stage", i, "shrinkage", 1.0),
                             self.names(entry, "stage", i, "features") or (), _from_toml(params))
        except StageSpecError as err:
            raise self.fail(str(err), "stage", i, "shrinkage") from None
        try:
            found.resolve_params(spec.params, task or "regression")
        except StageSpecError as err:
            raise self.fail(str(err), "stage", i, "params") from None
        repeat = self.integer(entry, "stage", i, "repeat", 1)
        if repeat < 1:
            raise self.fail(f"repeat must be at least 1, not {repeat}", "stage", i, "repeat")
        if repeat > MAX_REPEAT:
            raise self.fail(f"repeat must be at most {MAX_REPEAT:,} (a documented limit), not {repeat:,}", "stage", i,
                            "repeat")
        return spec, repeat

    def patience(self, doc: dict[str, Any]) -> dict[int, int]:
        """Return stage entry -> patience for the entries that grow (``repeat`` with ``patience``)."""
        found = {}
        for i, entry in enumerate(doc.get("stage") or []):
            if "patience" in entry:
                value = self.integer(entry, "stage", i, "patience", 10)
                if value < 1:
                    raise self.fail(f"patience must be at least 1, not {value}", "stage", i, "patience")
                found[i] = value
        return found


def _depth(value: Any) -> int:
    """Return how deeply lists and tables nest in ``value`` (a plain value is 0 deep)."""
    deepest, stack = 0, [(value, 0)]
    while stack:
        item, depth = stack.pop()
        if isinstance(item, dict | list):
            deepest = max(deepest, depth + 1)
            stack.extend((inner, depth + 1) for inner in (item.values() if isinstance(item, dict) else item))
    return deepest


def _from_toml(value: Any, none: Any = NONE_TEXT, to: Any = None) -> Any:
    """Return a params value with ``none`` replaced by ``to`` at any depth (TOML's stand-in for None)."""
    if isinstance(value, list | tuple):
        return [_from_toml(v, none, to) for v in value]
    if isinstance(value, dict):
        return {k: _from_toml(v, none, to) for k, v in value.items()}
    return to if value is none or (isinstance(none, str) and value == none) else value


# ----------------------------------------------------------------------------- writing

def recipe_to_toml(recipe: Recipe, base_dir: str | os.PathLike | None = None) -> str:
    """Return the TOML text of ``recipe``; the data path is written relative to ``base_dir``
    (the current folder by default) when it can be."""
    out = ["# remnant recipe: replay with `remnant fit RECIPE --out CHAIN`", "", "[data]"]
    if recipe.data_path is not None:
        out.append(f"path = {toml_value(_relative(recipe.data_path, base_dir))}")
    else:
        out.append('# path = "data.csv"  (not known: set it here or pass --data)')
    data: dict[str, Any] = {"target": recipe.target, "ignore": list(recipe.ignore), "features": recipe.features,
                            "task": recipe.task, "positive": recipe.positive}
    out += _pairs({k: v for k, v in data.items() if v is not None and v != []})
    out += ["", "[chain]"]
    out += _pairs({k: v for k, v in {"loss": recipe.loss, "seed": recipe.seed, "threshold": recipe.threshold}.items()
                   if v is not None})
    out += ["", "[validation]", *_pairs(recipe.validation.to_dict())]
    for i, (spec, repeat) in enumerate(recipe.stages):
        entry = spec.to_dict()
        if "params" in entry:
            entry["params"] = _from_toml(entry["params"], None, NONE_TEXT)
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
                candidate["params"] = _from_toml(candidate["params"], None, NONE_TEXT)
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
    used = set(chain.validation.columns_used)
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
                      data_path=data_path)
    except ValidationSpecError as err:
        raise RecipeError(f"{recipe.where('validation')}: {err}") from None
    except StageSpecError as err:
        raise RecipeError(f"{recipe.where('chain', 0, 'loss')}: {err}") from None
    _check_stage_features(recipe, chain)
    return chain


def _check_columns(recipe: Recipe, columns: list[str], data_name: str) -> None:
    """Raise RecipeError, with the recipe line, for a column the recipe names that the data lacks."""
    named = [("target", recipe.target)] + [("ignore", c) for c in recipe.ignore]
    named += [("features", c) for c in recipe.features or ()]
    named += [("column", c) for c in recipe.validation.columns_used]
    for key, column in named:
        if column in columns:
            continue
        table = "validation" if key == "column" else "data"
        close = difflib.get_close_matches(column, columns, n=1)
        hint = f" (did you mean {close[0]!r}?)" if close else ""
        raise RecipeError(f"{recipe.where(table, 0, key)}: {key} {column!r} is not a column of {data_name}{hint}")


def _check_stage_features(recipe: Recipe, chain: Chain) -> None:
    for i, (spec, _) in enumerate(recipe.stages):
        try:
            chain.schema.index_of(spec.features)
        except RemnantError as err:
            raise RecipeError(f"{recipe.where('stage', i, 'features')}: [[stage]] {spec.kind!r}: {err}") from None
