"""Exact fits on every fitting row of a chain on a Dask cluster, against the in-memory chain.

The references are outside the cluster path: the in-memory ``stages.Chain`` on the same parts (a
split column from the same hash of the row labels), numpy's median, scikit-learn's Ridge and
PoissonRegressor on a design built here with numpy, LightGBM's own ``LGBMRegressor`` on one
machine, and scikit-learn's mean_poisson_deviance.
"""

from __future__ import annotations

import pytest

pytest.importorskip("distributed")
pytest.importorskip("dask.dataframe")

import dask.array as da  # noqa: E402
import dask.dataframe as dd  # noqa: E402
import lightgbm  # noqa: E402
import numpy as np  # noqa: E402
import pandas as pd  # noqa: E402
from sklearn.datasets import make_friedman1  # noqa: E402
from sklearn.linear_model import PoissonRegressor, Ridge  # noqa: E402
from sklearn.metrics import mean_poisson_deviance  # noqa: E402

import stages  # noqa: E402
from stages.bridges.cluster_chain import ClusterChain  # noqa: E402
from stages.bridges.cluster_fit import bin_codes, bin_edges, cluster_booster_params, fit_on_rows  # noqa: E402
from stages.bridges.cluster_lstsq import exact_medians  # noqa: E402
from stages.bridges.cluster_rows import VALID, in_sample, part_codes  # noqa: E402
from stages.errors import DataError, StageFitError, StageSpecError  # noqa: E402
from stages.kinds import get_kind  # noqa: E402
from stages.spec import StageSpec  # noqa: E402

FEATURES = [f"x{i}" for i in range(5)]
SEED, SPLIT_SEED, SAMPLE_ROWS = 4, 1, 900


@pytest.fixture(scope="module")
def friedman() -> pd.DataFrame:
    """Return Friedman #1 data (Friedman 1991, scikit-learn's make_friedman1), 2,400 rows, a seventh of
    x2 missing and x3 in steps, with the part of each row from the hash of its label."""
    X, y = make_friedman1(n_samples=2400, n_features=5, noise=1.0, random_state=0)
    X[::7, 2] = np.nan
    X[:, 3] = np.round(X[:, 3] * 8) - 4
    frame = pd.DataFrame(X, columns=FEATURES)
    frame["y"] = y
    frame["count"] = np.random.RandomState(1).poisson(np.exp(0.1 * y - 0.5))  # counts whose log-mean follows y
    frame["split"] = np.where(part_codes(frame.index.to_numpy(), 0.2, 0.0, SPLIT_SEED) == VALID, "valid", "train")
    return frame


@pytest.fixture(scope="module")
def client():
    from distributed import Client, LocalCluster

    with LocalCluster(n_workers=2, threads_per_worker=1, processes=False, dashboard_address=":0") as cluster, \
            Client(cluster) as client:
        yield client


def cluster_chain(frame: pd.DataFrame, client, target: str = "y", loss: str | None = None, **options) -> ClusterChain:
    ddf = dd.from_pandas(frame, npartitions=3)
    chain = stages.Chain.from_dask(ddf, target, stages.Holdout(0.2, seed=SPLIT_SEED), client, loss=loss,
                                   seed=SEED, features=FEATURES, sample_rows=SAMPLE_ROWS, **options)
    assert isinstance(chain, ClusterChain)
    return chain


def memory_chain(frame: pd.DataFrame, target: str = "y", loss: str | None = None, **options) -> stages.Chain:
    return stages.Chain(frame, target, stages.SplitColumn("split"), loss=loss, seed=SEED, features=FEATURES, **options)


def numpy_design(X: np.ndarray) -> np.ndarray:
    """Return the linear design built with numpy: the median fill, the population standard deviation,
    a 0/1 column after x2 for its missing values (the only column with any)."""
    filled = np.where(np.isnan(X), np.nanmedian(X, axis=0), X)
    return np.c_[(filled - filled.mean(axis=0)) / filled.std(axis=0), np.isnan(X[:, 2])]


def test_exact_medians_are_numpys_whatever_the_chunks():
    values = np.random.RandomState(0).normal(size=(1001, 3))
    values[::5, 1] = np.nan
    values[:, 2] = np.round(values[:, 2])  # ties
    values[:4, 0] = [-0.0, 0.0, -1e-300, np.inf]
    for rows in (1001, 1000, 2, 1):
        medians, present = exact_medians(da.from_array(values[:rows], chunks=(137, 3)))
        columns = [c[~np.isnan(c)] for c in values[:rows].T]
        np.testing.assert_array_equal(medians, [np.median(c) if len(c) else 0.0 for c in columns])  # numpy's median
        np.testing.assert_array_equal(present, [len(c) for c in columns])


def test_ridge_on_every_fitting_row_is_the_in_memory_stage_and_scikit_learns(friedman, client):
    cluster, memory = cluster_chain(friedman, client), memory_chain(friedman)
    for chain in (cluster, memory):
        chain.add("ridge", params={"alpha": 40.0})
        chain.add("ridge", params={"alpha": 0.5, "fit_intercept": False})
    np.testing.assert_allclose(cluster.predict(friedman), memory.predict(friedman), rtol=1e-8)
    for ours, theirs in zip(cluster.scores(), memory.scores(), strict=True):
        for part in ("train", "valid"):
            assert getattr(ours, part)["rmse"] == pytest.approx(getattr(theirs, part)["rmse"], rel=1e-8)
    assert list(cluster.table()["fit_on"])[1:] == ["every fitting row"] * 2
    # scikit-learn's Ridge on the design built here with numpy
    train = friedman[friedman["split"] == "train"]
    X = train[FEATURES].to_numpy()
    design = numpy_design(X)
    start = train["y"].mean()
    reference = Ridge(alpha=40.0).fit(design, train["y"] - start)
    np.testing.assert_allclose(cluster.stages[0].learners[0].predict(X), reference.predict(design), rtol=1e-8)


def test_linear_with_missing_values_fills_them_as_in_memory(friedman, client):
    # the median fill of x2 comes from every fitting row, so the least squares are the in-memory ones
    cluster, memory = cluster_chain(friedman, client), memory_chain(friedman)
    for chain in (cluster, memory):
        chain.add("linear")
    np.testing.assert_allclose(cluster.predict(friedman), memory.predict(friedman), rtol=1e-8)
    assert cluster.scores()[1].valid["rmse"] == pytest.approx(memory.scores()[1].valid["rmse"], rel=1e-8)


def test_ridge_with_an_iterative_solver_is_refused_on_a_cluster(friedman, client):
    chain = cluster_chain(friedman, client)
    with pytest.raises((StageSpecError, StageFitError), match="solver 'sag' is not served on a cluster"):
        chain.add("ridge", params={"solver": "sag"})
    assert len(chain) == 0


def test_poisson_chain_of_glm_mean_and_lightgbm_is_the_in_memory_chain(friedman, client, tmp_path):
    cluster, memory = cluster_chain(friedman, client, "count", "poisson"), memory_chain(friedman, "count", "poisson")
    boost = {"n_estimators": 8, "num_leaves": 5, "learning_rate": 0.3}
    specs = [StageSpec("glm", params={"alpha": 0.01}), StageSpec("mean"), StageSpec("lightgbm", params=boost),
             StageSpec("forest", params={"n_estimators": 10, "max_depth": 4})]
    cluster.add_specs(specs)
    memory.add_specs(specs[:2])
    # glm and mean: the in-memory stages to 1e-8, every fitting row
    for i in range(3):
        ours, theirs = cluster.scores()[i], memory.scores()[i]
        for part in ("train", "valid"):
            for name in ("deviance", "rmse", "r2"):
                assert getattr(ours, part)[name] == pytest.approx(getattr(theirs, part)[name], rel=1e-8)
    train, valid = friedman[friedman["split"] == "train"], friedman[friedman["split"] == "valid"]
    X_train, X_valid = train[FEATURES].to_numpy(), valid[FEATURES].to_numpy()
    glm = cluster.stages[0].learners[0]
    np.testing.assert_allclose(glm.predict(X_valid), memory.stages[0].learners[0].predict(X_valid), rtol=1e-8)
    # scikit-learn's PoissonRegressor on the design built with numpy: the same objective (the start
    # is a constant offset, which its intercept takes up)
    reference = PoissonRegressor(alpha=0.01, solver="newton-cholesky", tol=1e-12, max_iter=1000)
    reference.fit(numpy_design(X_train), train["count"])
    np.testing.assert_allclose(np.exp(cluster.starts[0][0] + glm.predict(X_train)),
                               reference.predict(numpy_design(X_train)), rtol=1e-7)
    # lightgbm: LightGBM's poisson objective on one machine, on the same codes, from the chain's output
    chosen = in_sample(train.index.to_numpy(), SAMPLE_ROWS / len(train), SEED)
    edges = bin_edges(X_train[chosen])
    raw_train, raw_valid = memory.fitted().predict_raw(train), memory.fitted().predict_raw(valid)
    rng = np.random.RandomState(SEED)
    params = cluster_booster_params("lightgbm", get_kind("lightgbm").resolve_params(boost, "regression"), rng,
                                    memory.loss)
    assert params["objective"] == "poisson"
    model = lightgbm.LGBMRegressor(n_estimators=params.pop("num_boost_round"), **params)
    model.fit(bin_codes(X_train, edges), train["count"], init_score=raw_train)
    raw_train = raw_train + model.predict(bin_codes(X_train, edges), raw_score=True)
    raw_valid = raw_valid + model.predict(bin_codes(X_valid, edges), raw_score=True)
    expected = [mean_poisson_deviance(valid["count"], np.exp(raw_valid))]
    # the forest: the ordinary stage on the same sample in memory, fit to the loss's gradient there
    forest = fit_on_rows(X_train[chosen], train["count"].to_numpy(dtype=float)[chosen], raw_train[chosen].reshape(-1, 1),
                         memory.schema, memory.loss, [rng], specs[3], 4)
    raw_valid = raw_valid + forest.scale * forest.learners[0].predict(X_valid)
    expected.append(mean_poisson_deviance(valid["count"], np.exp(raw_valid)))
    np.testing.assert_allclose([s.valid["deviance"] for s in cluster.scores()[3:]], expected, rtol=1e-6)
    counts, _ = cluster.histogram()
    assert counts["valid"].sum() == cluster.layout.n_valid
    # the chain file is an ordinary poisson chain: it loads and predicts the mean without the cluster
    path = tmp_path / "counts.chain"
    cluster.save(path)
    np.testing.assert_allclose(stages.load(path).predict(valid), np.exp(raw_valid), rtol=1e-9)


def test_linear_and_ridge_on_the_log_link_take_the_in_memory_line_search(friedman, client):
    cluster, memory = cluster_chain(friedman, client, "count", "poisson"), memory_chain(friedman, "count", "poisson")
    for chain in (cluster, memory):
        chain.add("linear")
        chain.add("ridge", params={"alpha": 5.0}, shrinkage=0.5)
    np.testing.assert_allclose(cluster.predict(friedman), memory.predict(friedman), rtol=1e-8)
    for ours, theirs in zip(cluster.stages, memory.stages, strict=True):
        assert ours.step_rule == theirs.step_rule == "line search on fitting rows"
        assert ours.scale == pytest.approx(theirs.scale, rel=1e-7)


@pytest.mark.parametrize("loss", ["gamma", "tweedie"])
def test_glm_on_the_other_log_link_losses_is_the_in_memory_stage(friedman, client, loss):
    frame = friedman.assign(amount=friedman["count"] + 0.5 if loss == "gamma" else friedman["count"] * 1.5)
    cluster, memory = cluster_chain(frame, client, "amount", loss), memory_chain(frame, "amount", loss)
    for chain in (cluster, memory):
        chain.add("glm")
        chain.add("mean")
    np.testing.assert_allclose(cluster.predict(frame), memory.predict(frame), rtol=1e-8)
    for ours, theirs in zip(cluster.scores(), memory.scores(), strict=True):
        assert ours.valid["deviance"] == pytest.approx(theirs.valid["deviance"], rel=1e-8)


def test_what_a_cluster_does_not_fit_on_the_log_link_says_so(friedman, client):
    with pytest.raises(DataError, match="fits the losses squared, poisson, gamma, tweedie for now, not 'absolute'"):
        cluster_chain(friedman, client, "y", "absolute")
    with pytest.raises(DataError, match="1 row is negative; loss 'poisson' needs counts"):
        cluster_chain(friedman.assign(count=friedman["count"].where(friedman.index != 5, -1)), client, "count", "poisson")


def test_an_exposure_enters_the_raw_score_as_in_memory(friedman, client):
    frame = friedman.assign(months=np.random.RandomState(2).uniform(0.5, 12.0, len(friedman)))
    frame["claims"] = np.random.RandomState(3).poisson(frame["months"] * np.exp(0.1 * frame["y"] - 2.5))
    cluster = cluster_chain(frame, client, "claims", "poisson", exposure="months")
    memory = memory_chain(frame, "claims", "poisson", exposure="months")
    # the start with an offset: log(sum y / sum exposure) on the fitting rows (poisson's closed form)
    train = frame[frame["split"] == "train"]
    assert cluster.starts[0][0] == pytest.approx(np.log(train["claims"].sum() / train["months"].sum()), rel=1e-12)
    for chain in (cluster, memory):
        chain.add("mean")
        chain.add("glm", params={"alpha": 0.001})
    np.testing.assert_allclose(cluster.predict(frame), memory.predict(frame), rtol=1e-8)  # the rate per month
    for ours, theirs in zip(cluster.scores(), memory.scores(), strict=True):
        for part in ("train", "valid"):
            assert getattr(ours, part)["deviance"] == pytest.approx(getattr(theirs, part)["deviance"], rel=1e-8)
    assert cluster.fitted().exposure_column == "months"
    cluster.add("hist_tree", params={"max_depth": 2})  # LightGBM's poisson from the raw score with the offset
    assert cluster.scores()[3].train["deviance"] < cluster.scores()[2].train["deviance"]
    with pytest.raises(DataError, match="exposure column 'months' must be a positive number; 1 row is not"):
        cluster_chain(frame.assign(months=frame["months"].where(frame.index != 7, 0.0)), client, "claims", "poisson",
                      exposure="months")
    with pytest.raises(StageSpecError, match="an exposure is for the log-link losses"):
        cluster_chain(frame, client, "y", exposure="months")


def test_row_weights_count_as_in_memory(friedman, client):
    frame = friedman.assign(w=np.random.RandomState(5).choice([0.0, 0.5, 1.0, 3.0], len(friedman)))
    for target, loss, kinds in (("y", None, ("mean", "linear", "ridge", "glm")),
                                ("count", "poisson", ("glm", "mean", "linear"))):
        cluster = cluster_chain(frame, client, target, loss, weight="w")
        memory = memory_chain(frame, target, loss, weight="w")
        assert cluster.starts[0][0] == pytest.approx(memory.starts[0][0], rel=1e-12)
        for chain in (cluster, memory):
            for kind in kinds:
                chain.add(kind)
        np.testing.assert_allclose(cluster.predict(frame), memory.predict(frame), rtol=1e-8)
        for ours, theirs in zip(cluster.scores(), memory.scores(), strict=True):
            for part in ("train", "valid"):
                for name in ("loss", "rmse", "mae", "r2"):
                    assert getattr(ours, part)[name] == pytest.approx(getattr(theirs, part)[name], rel=1e-8)
        counts, _ = cluster.histogram()  # summed weights, as in memory
        valid = frame[frame["split"] == "valid"]
        assert counts["valid"].sum() == pytest.approx(valid["w"].sum(), rel=1e-12)
    assert cluster.fitted().weight_column == "w"
    # LightGBM takes the weights as sample_weight, the sampled kinds on the sample's weights
    cluster.add("lightgbm", params={"n_estimators": 5, "num_leaves": 4})
    cluster.add("tree", params={"max_depth": 3})
    losses = [s.train["loss"] for s in cluster.scores()]
    assert losses[-2] < losses[-3]
    assert list(cluster.table()["fit_on"])[-1].startswith("a sample of ")
    with pytest.raises(StageSpecError, match="cannot count rows by their weights"):
        cluster.add("knn")
    with pytest.raises(DataError, match="weight column 'w' is negative in row 4"):
        cluster_chain(frame.assign(w=frame["w"].where(frame.index != 3, -1.0)), client, weight="w")


def test_a_poisson_recipe_with_weights_and_exposure_fits_on_the_cluster(friedman, client, tmp_path):
    from stages.files.recipe import parse_recipe
    from tui.cli_cluster import fit_recipe_on_cluster

    frame = friedman.assign(months=np.random.RandomState(2).uniform(0.5, 12.0, len(friedman)),
                            w=np.random.RandomState(5).choice([0.5, 1.0, 2.0], len(friedman)))
    frame["claims"] = np.random.RandomState(3).poisson(frame["months"] * np.exp(0.1 * frame["y"] - 2.5))
    (tmp_path / "parts").mkdir()
    for i, rows in enumerate(np.array_split(np.arange(len(frame)), 3)):  # in data order: the labels are positions
        frame.iloc[rows].drop(columns="split").to_parquet(tmp_path / "parts" / f"part{i}.parquet", index=False)
    recipe = parse_recipe(f"""
[data]
path = "parts"
target = "claims"
features = {FEATURES!r}
weight = "w"
exposure = "months"

[chain]
loss = "poisson"
seed = {SEED}

[validation]
fraction = 0.2
seed = {SPLIT_SEED}

[cluster]
sample_rows = {SAMPLE_ROWS}

[[stage]]
kind = "glm"

[[stage]]
kind = "mean"
""".replace("'", '"'), tmp_path)
    cluster = fit_recipe_on_cluster(recipe, client)
    memory = memory_chain(frame, "claims", "poisson", weight="w", exposure="months")
    memory.add("glm")
    memory.add("mean")
    np.testing.assert_allclose(cluster.predict(frame), memory.predict(frame), rtol=1e-8)
    assert cluster.scores()[-1].valid["deviance"] == pytest.approx(memory.scores()[-1].valid["deviance"], rel=1e-8)
    again = parse_recipe(cluster.to_recipe(), tmp_path)  # the recipe it writes keeps the loss and the columns
    assert (again.loss, again.weight, again.exposure) == ("poisson", "w", "months")
