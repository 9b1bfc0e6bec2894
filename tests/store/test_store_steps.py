"""The chain file keeps how each stage's step was chosen, its notes and its out-of-bag loss.

Data: scikit-learn's breast cancer data (Wisconsin diagnostic, UCI), separable by a hyperplane.
"""

from __future__ import annotations

import json
import zipfile

import numpy as np
import pandas as pd
from sklearn.datasets import load_breast_cancer

import stages


def test_step_rules_notes_and_out_of_bag_losses_survive_the_chain_file(tmp_path):
    frame = load_breast_cancer(as_frame=True).frame
    frame.columns = [c.replace(" ", "_") for c in frame.columns]
    chain = stages.Chain(frame, "target", stages.Holdout(fraction=0.3, seed=0))
    chain.add("logistic", params={"penalty": "none"})
    chain.add("tree", 0.1, params={"subsample": 0.5})
    chain.add("knn", 0.5)
    chain.save(tmp_path / "c.chain")
    loaded = stages.load(tmp_path / "c.chain")
    for live, stored in zip(chain.stages, loaded.stages, strict=True):
        assert (stored.step_rule, stored.notes, stored.oob_loss) == (live.step_rule, live.notes, live.oob_loss)
        assert stored.step == live.step
    assert loaded.stages[0].notes[0].startswith("separation:")
    with zipfile.ZipFile(tmp_path / "c.chain") as archive:
        manifest = json.loads(archive.read("manifest.json"))
    assert manifest["stages"][2]["step"] == {"rule": "cross-fit 5 folds", "value": chain.stages[2].step}
    assert manifest["stages"][1]["oob_loss"] == list(chain.stages[1].oob_loss)
    # the table of a loaded chain file shows what the live chain's table shows
    from tui.table_text import fitted_table

    shown = fitted_table(loaded)
    assert shown["step_rule"].tolist() == chain.table()["step_rule"].tolist()
    pd.testing.assert_series_equal(shown["oob_improvement"], chain.table()["oob_improvement"])
    assert np.isnan(shown["oob_improvement"].iloc[1])
