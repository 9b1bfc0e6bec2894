"""A residual chain whose LightGBM stage trains on a Dask cluster: the working small case of
``docs/scaling.md``.

The chain is a start value (the mean), a ``mean`` stage, a ``linear`` stage fit on a sample of
the fitting rows, and a LightGBM stage trained with ``lightgbm.DaskLGBMRegressor`` from
``init_score`` set to the chain's output so far. ``fit_on_dask`` runs it over a Dask DataFrame;
``fit_in_memory`` runs the very same steps over a pandas DataFrame, so the two can be compared.

Rows are placed by a hash of their row label (the frame's index), never by their position:
the holdout and the linear stage's sample are the same rows whatever the partitioning.
LightGBM's distributed training finds each feature's bins from the rows of one worker only,
so the LightGBM stage is trained on bin codes computed on this machine instead: quantile edges
of the linear stage's sample, broadcast to every partition (``bin_codes``). Each code is then a
bin of its own on every worker, and distributed and single-machine training find the same trees
(as long as every partition holds every code: each holds about 1/``n_bins`` of the rows).

Each stage's cumulative output on the fitting rows is kept (``ChainFit.cached``): numpy arrays
in memory, Dask arrays persisted on the workers, chunked like the partitions.

Dask is imported only by ``local_cluster_fit`` (``fit_on_dask`` is handed a Dask frame and a
client): the engine imports without it. Features must be numeric columns (NaN allowed);
categorical columns stay with the in-memory engine for now.
"""

from __future__ import annotations

from dataclasses import dataclass, field
from typing import Any

import numpy as np
import pandas as pd

from ..kinds import FitRequest, get_kind
from ..losses import get_loss
from ..schema import NUMERIC, ColumnInfo

SPLIT_SALT = 0x5EED_0001
SAMPLE_SALT = 0x5EED_0002
#: LightGBM settings both paths share: one bin per code, the data-parallel learner, one thread each
FIXED_PARAMS: dict[str, Any] = {
    "max_bin": 255, "min_data_in_bin": 1, "tree_learner": "data", "num_threads": 1, "deterministic": True,
    "force_row_wise": True, "verbosity": -1,
}
DEFAULT_PARAMS: dict[str, Any] = {"n_estimators": 50, "num_leaves": 15, "learning_rate": 0.1, "min_child_samples": 20}


@dataclass
class ChainSettings:
    """What both paths need: target, features, holdout share, linear sample share, seed, LightGBM params."""

    target: str
    features: list[str]
    valid_fraction: float = 0.2
    sample_fraction: float = 0.25
    seed: int = 0
    n_bins: int = 64
    params: dict[str, Any] = field(default_factory=lambda: dict(DEFAULT_PARAMS))


@dataclass
class BinnedBooster:
    """A LightGBM booster trained on bin codes: ``predict`` codes the rows with ``edges`` first."""

    edges: list[np.ndarray]
    booster: Any

    def predict(self, X: np.ndarray) -> np.ndarray:
        """Return the booster's raw output on the feature rows ``X``."""
        return self.booster.predict(bin_codes(X, self.edges), raw_score=True)


@dataclass
class ChainFit:
    """A fitted chain: start value, the mean stage's shift, the linear model, the binned booster, and scores."""

    start: float
    shift: float
    linear: Any
    boosted: BinnedBooster
    scores: dict[str, float]
    cached: dict[str, Any] = field(default_factory=dict)  # stage -> output after it, on the fitting rows

    def offset(self, X: np.ndarray) -> np.ndarray:
        """Return the chain's output before the LightGBM stage on the feature rows ``X``."""
        return self.start + self.shift + self.linear.predict(X)

    def raw(self, X: np.ndarray) -> np.ndarray:
        """Return the chain's output on the feature rows ``X``."""
        return self.offset(X) + self.boosted.predict(X)


def bin_edges(sample: np.ndarray, n_bins: int) -> list[np.ndarray]:
    """Return per feature the inner quantile edges of ``sample`` (at most ``n_bins - 1``, distinct)."""
    inner = np.linspace(0.0, 1.0, n_bins + 1)[1:-1]
    return [np.unique(np.nanquantile(sample[:, j], inner)) for j in range(sample.shape[1])]


def bin_codes(X: np.ndarray, edges: list[np.ndarray]) -> np.ndarray:
    """Return the bin code (1, 2, ...) of every value of ``X``; NaN stays NaN (LightGBM's missing value)."""
    codes = np.empty(X.shape, dtype=np.float64)
    for j, cuts in enumerate(edges):
        codes[:, j] = np.searchsorted(cuts, X[:, j], side="left") + 1
    codes[np.isnan(X)] = np.nan
    return codes


def row_uniform(labels: np.ndarray, seed: int, salt: int) -> np.ndarray:
    """Return one number in [0, 1) per integer row label, from a splitmix64 hash of label, seed and salt."""
    with np.errstate(over="ignore"):
        z = labels.astype(np.uint64) + np.uint64((seed * 0x9E3779B97F4A7C15 + salt) % 2**64)
        z = (z ^ (z >> np.uint64(30))) * np.uint64(0xBF58476D1CE4E5B9)
        z = (z ^ (z >> np.uint64(27))) * np.uint64(0x94D049BB133111EB)
        z = z ^ (z >> np.uint64(31))
    return (z >> np.uint64(11)).astype(np.float64) / 2.0**53


def holdout_parts(labels: np.ndarray, fraction: float, seed: int) -> np.ndarray:
    """Return "valid" for about ``fraction`` of the rows (by hash of their labels), "train" for the rest."""
    return np.where(row_uniform(labels, seed, SPLIT_SALT) < fraction, "valid", "train")


def _with_parts(part: pd.DataFrame, settings: ChainSettings) -> pd.DataFrame:
    labels = part.index.to_numpy()
    return part.assign(_part=holdout_parts(labels, settings.valid_fraction, settings.seed),
                       _sampled=row_uniform(labels, settings.seed, SAMPLE_SALT) < settings.sample_fraction)


def lightgbm_params(settings: ChainSettings) -> dict[str, Any]:
    """Return the LightGBM parameters both paths train with."""
    return {**settings.params, **FIXED_PARAMS, "random_state": settings.seed}


def fit_linear(sample: pd.DataFrame, settings: ChainSettings, offset: float) -> Any:
    """Return the engine's ``linear`` learner fit to the residuals of ``sample`` from the constant ``offset``."""
    X = sample[settings.features].to_numpy(dtype=np.float64)
    y = sample[settings.target].to_numpy(dtype=np.float64)
    raw = np.full(len(y), offset)
    loss = get_loss("squared", "regression")
    columns = tuple(ColumnInfo(name, NUMERIC, "float64") for name in settings.features)
    request = FitRequest(X=X, columns=columns, residual=loss.residual(y, raw), y=y, raw=raw, loss=loss,
                         task="regression", random_state=np.random.RandomState(settings.seed))
    kind = get_kind("linear")
    return kind.fit(request, kind.resolve_params({}, "regression"))


def _squared_errors(part: pd.DataFrame, fit: ChainFit, settings: ChainSettings) -> pd.DataFrame:
    """Return the sum of squared errors and the row count of one partition, as a one-row frame."""
    X = part[settings.features].to_numpy(dtype=np.float64)
    error = part[settings.target].to_numpy(dtype=np.float64) - fit.raw(X)
    return pd.DataFrame({"sse": [float(np.dot(error, error))], "n": [len(error)]})


def fit_in_memory(frame: pd.DataFrame, settings: ChainSettings) -> ChainFit:
    """Return the chain fit on a pandas DataFrame (rows labelled by its integer index)."""
    import lightgbm

    data = _with_parts(frame, settings)
    fit_rows, valid_rows = data[data["_part"] == "train"], data[data["_part"] == "valid"]
    y = fit_rows[settings.target].to_numpy(dtype=np.float64)
    start = float(np.mean(y))
    shift = float(np.mean(y - start))
    sample = fit_rows[fit_rows["_sampled"]]
    linear = fit_linear(sample, settings, start + shift)
    X = fit_rows[settings.features].to_numpy(dtype=np.float64)
    edges = bin_edges(sample[settings.features].to_numpy(dtype=np.float64), settings.n_bins)
    offset = start + shift + linear.predict(X)
    model = lightgbm.LGBMRegressor(**lightgbm_params(settings))
    model.fit(bin_codes(X, edges), y, init_score=offset)
    fit = ChainFit(start, shift, linear, BinnedBooster(edges, model.booster_), {})
    fit.cached = {"linear": offset, "lightgbm": offset + fit.boosted.predict(X)}
    fit.scores = {part: _rmse(_squared_errors(rows, fit, settings)) for part, rows in
                  (("train", fit_rows), ("valid", valid_rows))}
    return fit


def _rmse(errors: pd.DataFrame) -> float:
    return float(np.sqrt(errors["sse"].sum() / errors["n"].sum()))


def fit_on_dask(frame: Any, settings: ChainSettings, client: Any) -> ChainFit:
    """Return the chain fit on a Dask DataFrame: reductions for the constants, ``map_partitions``
    for residuals and scores, and ``DaskLGBMRegressor`` on the cluster of ``client``."""
    import lightgbm

    data = frame.map_partitions(_with_parts, settings).persist()
    fit_rows, valid_rows = data[data["_part"] == "train"], data[data["_part"] == "valid"]
    start = float(fit_rows[settings.target].mean().compute())
    shift = float((fit_rows[settings.target] - start).mean().compute())
    sample = fit_rows[fit_rows["_sampled"]].compute()  # the sample fits on this machine
    linear = fit_linear(sample, settings, start + shift)
    edges = bin_edges(sample[settings.features].to_numpy(dtype=np.float64), settings.n_bins)
    X = fit_rows[settings.features].to_dask_array(lengths=True).astype(np.float64)
    y = fit_rows[settings.target].to_dask_array(lengths=True).astype(np.float64)
    codes = X.map_blocks(bin_codes, edges, dtype=np.float64)
    offset = X.map_blocks(lambda block: start + shift + linear.predict(block), drop_axis=1,
                          dtype=np.float64).persist()
    params = {k: v for k, v in lightgbm_params(settings).items() if k != "num_threads"}  # workers set their own
    model = lightgbm.DaskLGBMRegressor(client=client, **params).fit(codes, y, init_score=offset)
    fit = ChainFit(start, shift, linear, BinnedBooster(edges, model.to_local().booster_), {})
    boosted = X.map_blocks(fit.boosted.predict, drop_axis=1, dtype=np.float64)
    fit.cached = {"linear": offset, "lightgbm": (offset + boosted).persist()}
    meta = pd.DataFrame({"sse": pd.Series(dtype=np.float64), "n": pd.Series(dtype=np.int64)})
    fit.scores = {part: _rmse(rows.map_partitions(_squared_errors, fit, settings, meta=meta).compute())
                  for part, rows in (("train", fit_rows), ("valid", valid_rows))}
    return fit


def local_cluster_fit(frame: pd.DataFrame, settings: ChainSettings, *, n_workers: int = 2) -> ChainFit:
    """Return the chain fit by ``fit_on_dask`` on a local cluster of ``n_workers`` (threads, loopback),
    over ``frame`` cut into ``n_workers`` partitions."""
    import dask.dataframe as dd
    from distributed import Client, LocalCluster

    with LocalCluster(n_workers=n_workers, threads_per_worker=1, processes=False, dashboard_address=None) as cluster, \
            Client(cluster) as client:
        return fit_on_dask(dd.from_pandas(frame, npartitions=n_workers), settings, client)


def local_cluster_score(frame: pd.DataFrame, settings: ChainSettings, *, n_workers: int = 2) -> float:
    """Return the validation RMSE of the chain trained on a local cluster of ``n_workers``."""
    return local_cluster_fit(frame, settings, n_workers=n_workers).scores["valid"]
