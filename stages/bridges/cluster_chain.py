"""A ``stages.Chain`` whose rows live on a Dask cluster: ``Chain.from_dask`` returns one.

It is the ordinary chain (the same stages, scores, undo stack, random streams, table, recipe and
chain file); only the rows and the cached outputs sit elsewhere: the rows on the workers
(``cluster_rows``), each stage's cumulative output as a Dask array persisted there. Stepping
back, trimming and undoing only drop or put back stages, with no computation; adding and
dropping fit stages over the cluster (``cluster_fit``); scores are one reduction per stage.
What needs the rows on this machine (residual scans, partial dependence, auditions, sessions...)
raises ChainStateError saying a chain on a cluster cannot serve it yet.

For now a chain on a cluster is a regression chain with squared loss or a loss on the log link
(``cluster_loss``) over numeric features,
validated by a holdout, k folds (one track per fold, ``cluster_folds``) or no validation; the parts
and folds come from a hash of each row's label.
"""

from __future__ import annotations

import logging
import os
import threading
from dataclasses import dataclass
from typing import Any

import numpy as np
import pandas as pd

from ..chain import Chain
from ..chain_state import seeded_streams
from ..errors import ChainStateError, ValidationSpecError
from ..fitting import Stage
from ..kinds.base import ProgressFn
from ..loglink import LogLinkLoss
from ..scoring import Scores
from ..spec import StageSpec
from ..tracks import Layout, Track
from ..validation import AllRows, Holdout, KFold, Part, ValidationSpec
from .cluster_fit import CLUSTER_KINDS, ClusterContext, bin_edges, fit_cluster_stage
from .cluster_folds import fold_track_rows, fold_track_sample, merge_tracks
from .cluster_loss import (
    check_cluster_target,
    check_exposure_column,
    cluster_loss,
    exposure_offset,
    log_link_part_sums,
    log_link_scores,
    offset_start,
    shown_residual,
    start_value,
)
from .cluster_lost_worker import check_workers_free
from .cluster_rows import (
    DEFAULT_SAMPLE_ROWS,
    TEST,
    TRAIN,
    VALID,
    ClusterRows,
    build_rows,
    numeric_schema,
    require_dask,
)
from .cluster_weights import (
    check_weight_column,
    weight_vector,
    weighted_part_scores,
    weighted_start,
)

#: rows of the sample a chain file keeps as its probe (as stages.files.store keeps)
PROBE_ROWS = 64
log = logging.getLogger(f"remnant.{__name__}")
PART_CODES = {"train": TRAIN, "valid": VALID, "test": TEST}


@dataclass
class ClusterPrepared:
    """What a chain on a cluster says about its data preparation: the notes and whether the features were inferred."""

    notes: tuple[str, ...]
    features_inferred: bool


def not_served(what: str) -> ChainStateError:
    """Return the error of a method a chain on a cluster cannot serve yet."""
    return ChainStateError(f"a chain on a Dask cluster cannot serve {what} yet: save it and load the chain file "
                           "(stages.load) on one machine, or fit it in memory")


class ClusterChain(Chain):
    """A residual chain over a Dask DataFrame: the rows on the cluster of ``client``, the chain here.

    ``sample_rows`` is the size of the sample pulled here for the kinds with no distributed
    learner (and for the LightGBM bin edges); ``row_id`` names an integer
    column that labels the rows (default: the frame's integer index when its divisions are
    known, else each row's position in the data).
    """

    def __init__(self, frame: Any, target: str, validation: ValidationSpec | None = None, loss: str | None = None,
                 *, client: Any = None, seed: int = 0, ignore: tuple[str, ...] | list[str] = (),
                 features: list[str] | None = None, sample_rows: int = DEFAULT_SAMPLE_ROWS,
                 row_id: str | None = None, source: str = "frame",
                 data_path: str | os.PathLike | None = None, power: float | None = None,
                 exposure: str | None = None, weight: str | None = None) -> None:
        require_dask()
        if client is None:
            client = _current_client()
        self.validation = validation if validation is not None else Holdout()
        if not isinstance(self.validation, Holdout | KFold | AllRows):
            raise ValidationSpecError(f"a chain on a Dask cluster is validated by a holdout or k folds for now, "
                                      f"not by {self.validation.describe()}")
        folds = self.validation.folds if isinstance(self.validation, KFold) else 0
        self.loss = cluster_loss(loss, power)
        if exposure is not None:
            exposure = check_exposure_column(frame._meta, exposure, self.loss, source)
        if weight is not None:
            weight = check_weight_column(frame._meta, weight, source)
        self.ignore = tuple(ignore) + tuple(c for c in (row_id, exposure, weight) if c and c not in ignore)
        self.schema = numeric_schema(frame._meta, target, features, self.ignore)
        self.client, self.sample_rows, self.row_id = client, int(sample_rows), row_id
        self.cluster_settings: Any = None  # the recipe's [cluster] table when a recipe built the chain
        fraction = getattr(self.validation, "fraction", 0.0)
        test_fraction = getattr(self.validation, "test_fraction", 0.0)
        self.rows: ClusterRows = build_rows(frame, self.schema, fraction=fraction, test_fraction=test_fraction,
                                            seed=getattr(self.validation, "seed", 0), folds=folds, row_id=row_id,
                                            columns=tuple(c for c in (exposure, weight) if c))
        check_cluster_target(self.rows, self.loss, target, source)
        n = sum(self.rows.chunks)
        counts = [self.rows.n_part(k) for k in (TRAIN, VALID, TEST)]
        if counts[0] == 0:
            raise ValidationSpecError(f"{self.validation.describe()}: no row of the {n:,} is left to fit on")
        # a fold track's rows are not positions here: its rows are ``track_rows`` (cluster_folds)
        fold_tracks = tuple(Track(n_rows=counts[0], fit=slice(0, 0), evaluate=np.empty(0, dtype=np.int64))
                            for _ in range(folds))
        self.layout = Layout(np.empty(0, dtype=np.int64), counts[0], counts[1], counts[2],
                             (Track(n_rows=n, fit=slice(0, counts[0])), *fold_tracks))
        self.seed = int(seed)
        self.sample = self.rows.sample(self.sample_rows, self.seed)
        self.track_rows: tuple[ClusterRows, ...] = (self.rows, *(fold_track_rows(self.rows, f) for f in range(folds)))
        for f, track in enumerate(self.track_rows[1:]):
            if track.n_part(TRAIN) == 0 or track.n_part(VALID) == 0:
                raise ValidationSpecError(f"{self.validation.describe()}: fold {f + 1} leaves no row to fit on "
                                          "or none to score")
        if folds:
            sample_folds = np.asarray(self.rows.sampled_rows(self.rows.fold).compute())
            self.track_samples = (self.sample, *(fold_track_sample(self.sample, sample_folds, f) for f in range(folds)))
        else:
            self.track_samples = (self.sample,)
        self.schema = self.schema.with_fills(self.sample[0])
        self.edges = bin_edges(self.sample[0])
        self.prepared = ClusterPrepared((), features is None)  # type: ignore[assignment]
        self.threshold, self.source = 0.5, source
        self.data_path = None if data_path is None else os.fspath(data_path)
        self.weight = self.offset = None
        self.weight_column, self.exposure_column = weight, exposure
        # each row's weight, a Dask vector on the workers (None: every row counts once)
        self.row_weight = None if weight is None else weight_vector(self.rows, weight, source)
        self._stages: tuple[Stage, ...] = ()
        self._scores: list[Scores] = []
        self._fresh_scores: dict[int, Scores] = {}
        self._removals = []
        # the workers' own cores: this machine's thread setting is not theirs to take
        self.threads = None
        self._rngs = seeded_streams(self.seed, len(self.layout.tracks))
        self._lock = threading.RLock()
        import dask.array as da

        offset = None if exposure is None else exposure_offset(self.rows, exposure, source)
        starts, firsts = [], []
        for rows in self.track_rows:  # each track's start from its own fitting rows
            if self.row_weight is not None:
                start = weighted_start(rows, self.loss, self.row_weight, offset)
            elif offset is not None:
                start = offset_start(rows, self.loss, offset)  # type: ignore[arg-type]
            else:
                start = start_value(self.loss, float(rows.part_rows(rows.y, TRAIN).mean().compute()))
            if offset is None:
                first = da.full((n, 1), start, chunks=(self.rows.chunks, 1), dtype=np.float64)
            else:  # log(exposure) enters every row's raw score
                first = (offset + start)[:, None]
            starts.append(np.array([start]))
            firsts.append(first.persist())
        self.starts = tuple(starts)
        self._start_outputs = tuple(firsts)
        self._start_scores = self._score(self._start_outputs)
        self.test_revealed, self.reveal_count = False, 0
        self._test: dict[int, dict[str, float]] = {}
        log.info("chain on a cluster: %s rows in %d partitions, %s", f"{n:,}", len(self.rows.chunks),
                 self.validation.describe())

    # ----- what differs: fitting and scoring over the cluster --------------------------------------
    def _fit_sequence(self, specs: list[StageSpec], previous: tuple[Any, ...], first_number: int,
                      cancel: threading.Event | None, progress: ProgressFn | None) -> list[Stage]:
        tracks = [ClusterContext(rows, self.schema, self.loss, [rng], self.client, sample, self.edges, self.row_weight)
                  for rows, rng, sample in zip(self.track_rows, self._rngs, self.track_samples, strict=True)]
        fitted: list[Stage] = []
        state = [rng.get_state() for rng in self._rngs]
        check_workers_free(self.client)  # not behind a lost stage's training threads
        try:
            for i, spec in enumerate(specs):
                if progress is not None:
                    progress(i / len(specs), f"stage {first_number + i} ({spec.kind}) on the cluster")
                before = tuple(rng.get_state() for rng in self._rngs)
                fits = [fit_cluster_stage(ctx, spec, out, number=first_number + i, cancel=cancel)
                        for ctx, out in zip(tracks, previous, strict=True)]
                stage = merge_tracks(fits, before, tuple(rng.get_state() for rng in self._rngs))
                fitted.append(stage)
                previous = stage.outputs
        except BaseException:
            for rng, saved in zip(self._rngs, state, strict=True):
                rng.set_state(saved)
            raise
        if progress is not None:
            progress(1.0, "done")
        return fitted

    def _thin(self, stages: tuple[Stage, ...] | None = None, ahead: bool = False) -> None:
        """Keep every stage's outputs: they are persisted on the workers, not in this process, and a
        rebuild would have to predict every partition again."""

    def _score(self, outputs: tuple[Any, ...]) -> Scores:
        """Return the scores of one set of track outputs: the main track on the fitting rows and the
        validation rows; with k folds the validation scores are out of fold (each fold track on its own
        fold's rows, which its rows give the validation code), with the per-fold scores."""
        scores = self._part_scores(outputs[0])
        if len(outputs) == 1:
            return Scores(scores[TRAIN], scores[VALID])
        per_fold = [self._part_scores(out, rows)[VALID] for rows, out in
                    zip(self.track_rows[1:], outputs[1:], strict=True)]
        valid = self._out_of_fold_scores(outputs)
        return Scores(scores[TRAIN], valid, tuple(f[self.loss.primary] for f in per_fold))

    def _out_of_fold_scores(self, outputs: tuple[Any, ...]) -> dict[str, float]:
        """Return the scores of every fitting row, each predicted by the track that held its fold out."""
        import dask.array as da

        assert self.rows.fold is not None
        oof = outputs[1]
        for f, out in enumerate(outputs[2:], start=1):
            oof = da.where((self.rows.fold == f)[:, None], out, oof)
        # every fitting row scored out of fold: the main rows' train part, read as validation
        return self._part_scores(oof)[TRAIN]

    def _part_scores(self, output: Any, rows: ClusterRows | None = None) -> list[dict[str, float]]:
        """Return the scores of each part (train, valid, test) of the cumulative ``output`` over ``rows``
        (the chain's unless a fold track's): one reduction."""
        rows = self.rows if rows is None else rows
        shift = float(self.starts[0][0]) if hasattr(self, "starts") else 0.0
        if self.row_weight is not None:
            shift = float(np.exp(shift)) if isinstance(self.loss, LogLinkLoss) else shift
            return weighted_part_scores(rows, output, self.loss, shift, self.row_weight)
        if isinstance(self.loss, LogLinkLoss):
            shift = float(np.exp(shift))  # the y sums are taken about the start's mean
            return [log_link_scores(row) for row in log_link_part_sums(rows, output, self.loss, shift)]
        return [regression_scores(row) for row in part_sums(rows, output, shift)]

    def reveal_test(self) -> list[dict[str, float]]:
        """Score every row on the locked test part (one reduction per row) and return the scores."""
        with self._lock:
            if self.layout.n_test == 0:
                raise ChainStateError("this chain has no locked test part (set test_fraction when choosing validation)")
            rows = [self._start_outputs[0], *(s.outputs[0] for s in self._stages)]
            self._test = {i: self._part_scores(out)[TEST] for i, out in enumerate(rows)}
            self.test_revealed = True
            self.reveal_count += 1
            return [self._test[i] for i in range(len(rows))]

    def table(self) -> pd.DataFrame:
        """Return the stage table, with ``fit_on``: "every fitting row", or "a sample of N rows"."""
        frame = super().table()
        marks = ["", *("every fitting row" if s.kind in CLUSTER_KINDS else _sample_note(s) for s in self.stages)]
        return frame.assign(fit_on=marks[: len(frame)])

    def histogram(self, row: int | None = None, parts: tuple[Part, ...] = ("train", "valid"),
                  bins: int | str = "auto", max_bins: int = 60, of_class: object = None,
                  ) -> tuple[dict[str, np.ndarray], np.ndarray]:
        """Return residual counts per part over shared bin edges, and the edges: edges from the
        residuals' range (Sturges' count of bins unless ``bins`` is a number), counts by ``dask.array.histogram``."""
        import dask
        import dask.array as da

        outputs = self.outputs(row)
        shown = shown_residual(self.loss, self.rows.y, outputs[0][:, 0])
        residual = {p: self.rows.part_rows(shown, PART_CODES[p]) for p in parts}
        if self.layout.is_kfold and "valid" in parts:  # out of fold: each fold track on its own fold's rows
            residual["valid"] = da.concatenate([rows.part_rows(shown_residual(self.loss, rows.y, out[:, 0]), VALID)
                                                for rows, out in zip(self.track_rows[1:], outputs[1:], strict=True)])
        every = da.concatenate(list(residual.values()))
        low, high, n = dask.compute(every.min(), every.max(), every.size)
        count = bins if isinstance(bins, int) else int(np.ceil(np.log2(max(n, 1)) + 1))
        edges = np.linspace(float(low), float(high) if high > low else float(low) + 1.0, min(count, max_bins) + 1)
        weights = {p: None if self.row_weight is None else self.rows.part_rows(self.row_weight, PART_CODES[p])
                   for p in parts}  # summed row weights on a weighted chain, as in memory
        if self.layout.is_kfold and "valid" in parts and self.row_weight is not None:
            weights["valid"] = da.concatenate([rows.part_rows(self.row_weight, VALID) for rows in self.track_rows[1:]])
        counts = dask.compute(*(da.histogram(residual[p], bins=edges, weights=weights[p])[0] for p in parts))
        return dict(zip(parts, (np.asarray(c) for c in counts), strict=True)), edges

    def probe_rows(self) -> np.ndarray:
        """Return the probe rows a saved chain file keeps (the first rows of the sample): ``save`` writes
        the format of an in-memory fit, read back by ``stages.load`` without Dask, with no data
        fingerprint (hashing every row in data order would pull them here)."""
        return np.array(self.sample[0][:PROBE_ROWS], dtype=np.float64)

    def predict_dask(self, frame: Any) -> Any:
        """Return the chain's predictions for a Dask DataFrame, a Dask Series over its partitions."""
        from .cluster_predict import predict_partitions

        return predict_partitions(self.fitted(), frame)

    # ----- what needs the rows on this machine ---------------------------------------------------------
    @property
    def split(self) -> Any:  # type: ignore[override]
        """Raise ChainStateError: the positions of every part's rows would come to this machine."""
        raise not_served("the positions of each part's rows (split)")

    def residuals(self, *args: Any, **kwargs: Any) -> np.ndarray:
        """Raise ChainStateError: residuals of every row would come to this machine."""
        raise not_served("residuals row by row")

    def fitted_values(self, *args: Any, **kwargs: Any) -> np.ndarray:
        """Raise ChainStateError: fitted values of every row would come to this machine."""
        raise not_served("fitted values row by row")

    def part_targets(self, *args: Any, **kwargs: Any) -> np.ndarray:
        """Raise ChainStateError."""
        raise not_served("the targets of a part")

    def confusion(self, *args: Any, **kwargs: Any) -> pd.DataFrame:
        """Raise ChainStateError."""
        raise not_served("a confusion matrix")

    def importance(self, *args: Any, **kwargs: Any) -> dict[str, float]:
        """Raise ChainStateError."""
        raise not_served("feature importance")

    def audition(self, *args: Any, **kwargs: Any) -> list[Any]:
        """Raise ChainStateError."""
        raise not_served("auditions")

    def keep(self, *args: Any, **kwargs: Any) -> Stage:
        """Raise ChainStateError."""
        raise not_served("keeping an audition's candidate")

    def commit(self, *args: Any, **kwargs: Any) -> None:
        """Raise ChainStateError."""
        raise not_served("stages fitted elsewhere")

    def grow(self, *args: Any, **kwargs: Any) -> Any:
        """Raise ChainStateError."""
        raise not_served("growing until validation stops improving")

    def references(self, **options: Any) -> pd.DataFrame:
        """Raise ChainStateError."""
        raise not_served("reference models")

    def residual_scan(self, *args: Any, **kwargs: Any) -> pd.DataFrame:
        """Raise ChainStateError."""
        raise not_served("residual scans")

    def binned_residuals(self, *args: Any, **kwargs: Any) -> pd.DataFrame:
        """Raise ChainStateError."""
        raise not_served("binned residuals")

    def partial_dependence(self, *args: Any, **kwargs: Any) -> pd.DataFrame:
        """Raise ChainStateError."""
        raise not_served("partial dependence")

    def coefficients(self, *args: Any, **kwargs: Any) -> pd.DataFrame:
        """Raise ChainStateError."""
        raise not_served("coefficient tables")

    def curves(self, *args: Any, **kwargs: Any) -> pd.DataFrame:
        """Raise ChainStateError."""
        raise not_served("spline curves")

    def largest_residuals(self, *args: Any, **kwargs: Any) -> pd.DataFrame:
        """Raise ChainStateError."""
        raise not_served("the largest residuals")

    def calibration(self, *args: Any, **kwargs: Any) -> pd.DataFrame:
        """Raise ChainStateError."""
        raise not_served("calibration tables")

    def restore(self, *args: Any, **kwargs: Any) -> None:
        """Raise ChainStateError."""
        raise not_served("sessions")


def _current_client() -> Any:
    from distributed import default_client

    try:
        return default_client()
    except ValueError:
        raise ChainStateError("a chain on a Dask cluster needs a client: pass client=distributed.Client(...)") from None


def _sample_note(stage: Stage) -> str:
    for note in stage.notes:
        if note.startswith("fit on a sample of "):
            return note[len("fit on "):]
    return ""


def part_sums(rows: ClusterRows, output: Any, shift: float) -> np.ndarray:
    """Return per part (train, valid, test) the row count, the sums of squared and absolute errors and
    of y - shift and its square: one reduction over the partitions."""
    import dask.array as da

    sums = da.map_blocks(_block_sums, rows.y, output[:, 0], rows.part, shift, dtype=np.float64,
                         chunks=((15,) * len(rows.chunks),))
    total = np.asarray(sums.compute(), dtype=np.float64).reshape(-1, 3, 5).sum(axis=0)
    return total


def _block_sums(y: np.ndarray, output: np.ndarray, part: np.ndarray, shift: float) -> np.ndarray:
    out = np.zeros((3, 5))
    error = y - output
    for k in range(3):
        at = part == k
        e, centred = error[at], y[at] - shift
        out[k] = (at.sum(), e @ e, np.abs(e).sum(), centred.sum(), centred @ centred)
    return out.reshape(-1)


def regression_scores(sums: np.ndarray) -> dict[str, float]:
    """Return RMSE, MAE, R² and the loss (MSE) of one part from its ``part_sums`` row (NaN without rows)."""
    n, squared, absolute, total, total_squared = (float(v) for v in sums)
    if n == 0:
        return {"rmse": float("nan"), "mae": float("nan"), "r2": float("nan"), "loss": float("nan")}
    spread = total_squared - total * total / n
    mse = squared / n
    return {"rmse": float(np.sqrt(mse)), "mae": absolute / n, "r2": 1.0 - squared / spread if spread > 0 else float("nan"),
            "loss": mse}
