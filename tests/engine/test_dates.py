"""Features derived from a date column: chosen once, recorded in the schema, the chain file, the
recipe and the session, and derived the same way whenever a frame is encoded.

Data: the weekly Mauna Loa CO2 record that statsmodels ships (``statsmodels.datasets.co2``),
with its dates written as ISO text, as a CSV would hold them.
"""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest
import statsmodels.api as sm

import stages
from stages.dates import DATE_PARTS
from stages.errors import DataError, RecipeError
from stages.files.recipe import chain_to_recipe, parse_recipe
from stages.files.session import load_session, save_session, session_path


@pytest.fixture(scope="module")
def co2() -> pd.DataFrame:
    data = sm.datasets.co2.load_pandas().data.dropna()
    frame = data.reset_index(names="week")
    frame["week"] = frame["week"].dt.strftime("%Y-%m-%d")
    frame["noise"] = np.random.RandomState(0).normal(size=len(frame))
    return frame


def build(frame: pd.DataFrame, **options) -> stages.Chain:
    return stages.Chain(frame, "co2", stages.Holdout(fraction=0.2, seed=0), dates={"week": ["year", "month"]},
                        **options)


def test_date_parts_become_features_with_the_values_pandas_gives(co2):
    chain = build(co2)
    assert chain.schema.names == ["noise", "week_year", "week_month"]
    assert chain.schema.dates() == {"week": ("year", "month")}
    # reference: pandas' own datetime accessor on the same column, in chain order
    times = pd.to_datetime(co2["week"])
    rows = np.asarray(chain.prepared.rows)[chain.layout.order]
    np.testing.assert_array_equal(chain.matrix[:, 1], times.dt.year.to_numpy(dtype=float)[rows])
    np.testing.assert_array_equal(chain.matrix[:, 2], times.dt.month.to_numpy(dtype=float)[rows])
    assert any("gives date features: week_year, week_month" in note for note in chain.notes)


def test_every_part_matches_pandas_and_a_value_that_is_no_date_is_missing():
    times = pd.date_range("2023-12-30 05:00", periods=38, freq="37h").strftime("%Y-%m-%d %H:%M").tolist()
    frame = pd.DataFrame({"at": times + ["not a date", None], "y": np.arange(40) % 3})
    schema = stages.Chain(frame, "y", stages.AllRows(), dates={"at": list(DATE_PARTS)}).schema
    matrix, _ = schema.encode(frame)
    times = pd.to_datetime(frame["at"], errors="coerce", format="mixed")
    expected = np.column_stack([times.dt.year, times.dt.month, times.dt.day_of_week, times.dt.hour,
                                times.dt.day_of_year]).astype(float)
    np.testing.assert_array_equal(matrix, expected)
    assert np.isnan(matrix[-2:]).all() and len(np.unique(matrix[:-2, 2])) == 7


def test_a_saved_chain_derives_the_features_again_when_it_predicts(co2, tmp_path):
    chain = build(co2)
    chain.add("linear")
    chain.add("tree", 0.5, params={"max_depth": 3})
    chain.save(tmp_path / "co2.chain")
    fitted = stages.load(tmp_path / "co2.chain")
    assert fitted.schema.dates() == {"week": ("year", "month")}
    fresh = co2.drop(columns="co2").sample(frac=1.0, random_state=1)
    np.testing.assert_allclose(fitted.predict(fresh), chain.predict(fresh), rtol=1e-12)


def test_the_recipe_records_the_date_features_and_replays_the_same_chain(co2, tmp_path):
    path = tmp_path / "co2.csv"
    co2.to_csv(path, index=False)
    chain = stages.Chain.from_file(path, "co2", stages.Holdout(fraction=0.2, seed=0), dates={"week": ["month"]})
    chain.add("linear")
    text = chain_to_recipe(chain, base_dir=tmp_path)
    assert 'dates = { week = ["month"] }' in text
    replayed = stages.fit_recipe(parse_recipe(text, tmp_path))
    assert replayed.schema == chain.schema
    np.testing.assert_allclose(replayed.table()["valid_rmse"], chain.table()["valid_rmse"], rtol=1e-12)


def test_a_session_with_date_features_resumes_without_a_refit(co2, tmp_path, monkeypatch):
    monkeypatch.setenv("REMNANT_HOME", str(tmp_path / "home"))
    path = tmp_path / "co2.csv"
    co2.to_csv(path, index=False)
    chain = stages.Chain.from_file(path, "co2", stages.Holdout(fraction=0.2, seed=0), dates={"week": ["month"]})
    chain.add("spline", 0.5)
    save_session(chain)
    resumed = load_session(session_path(path))
    assert resumed.schema == chain.schema
    np.testing.assert_array_equal(resumed.outputs()[0], chain.outputs()[0])


def test_date_features_of_a_column_that_is_not_dates_or_of_an_unknown_part_are_refused(co2):
    with pytest.raises(DataError, match="column 'noise' does not hold dates"):
        stages.Chain(co2, "co2", dates={"noise": ["month"]})
    with pytest.raises(DataError, match="unknown date part 'season'.*parts: year, month, day_of_week"):
        stages.Chain(co2, "co2", dates={"week": ["season"]})
    with pytest.raises(DataError, match="date column 'wek' is not a column.*did you mean 'week'"):
        stages.Chain(co2, "co2", dates={"wek": ["month"]})
    with pytest.raises(RecipeError, match="line 4: dates: unknown part 'season' of 'week'"):
        parse_recipe('[data]\npath = "co2.csv"\ntarget = "co2"\ndates = { week = ["season"] }\n'
                     '[[stage]]\nkind = "linear"\n')
