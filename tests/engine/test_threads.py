"""Threads: sleeping OpenMP waits from ``import stages``, the usable cores (affinity, cgroup quota), the
chain's ``threads`` setting, and fitted stages that do not depend on the thread count."""

from __future__ import annotations

import os
import subprocess
import sys
from pathlib import Path

import numpy as np
import pytest

import stages
from stages import threads
from stages.errors import RecipeError, StageSpecError
from stages.files.recipe import parse_recipe, recipe_of_chain, recipe_to_toml

ROOT = Path(__file__).resolve().parents[2]


def _python(code: str, **env: str) -> subprocess.CompletedProcess:
    environ = {k: v for k, v in os.environ.items() if k not in ("OMP_WAIT_POLICY", "OMP_DISPLAY_ENV")}
    environ.update(env)
    return subprocess.run([sys.executable, "-c", code], cwd=ROOT, env=environ, capture_output=True, text=True,
                          timeout=120, check=True)


FIT_AFTER_IMPORT = """
import stages, lightgbm, numpy as np
rng = np.random.RandomState(0)
lightgbm.train({"verbosity": -1, "num_threads": 2}, lightgbm.Dataset(rng.rand(200, 3), rng.rand(200)), 2)
"""


def test_import_stages_makes_openmp_waits_sleep():
    # libgomp prints the settings it started with when OMP_DISPLAY_ENV is true (GNU libgomp manual,
    # "OMP_DISPLAY_ENV"): what the runtime itself read, not what os.environ says afterwards
    done = _python(FIT_AFTER_IMPORT, OMP_DISPLAY_ENV="TRUE")
    policies = [line.split("=")[1].strip() for line in done.stderr.splitlines() if "OMP_WAIT_POLICY" in line]
    assert policies and set(policies) == {"'PASSIVE'"}


def test_a_users_own_wait_policy_wins():
    done = _python(FIT_AFTER_IMPORT, OMP_DISPLAY_ENV="TRUE", OMP_WAIT_POLICY="ACTIVE")
    policies = [line.split("=")[1].strip() for line in done.stderr.splitlines() if "OMP_WAIT_POLICY" in line]
    assert policies and set(policies) == {"'ACTIVE'"}


def test_the_policy_is_set_before_any_openmp_library_loads():
    code = ("import sys, os; import stages; "
            "print(os.environ['OMP_WAIT_POLICY'], 'lightgbm' in sys.modules)")
    assert _python(code).stdout.split() == ["PASSIVE", "False"]


def test_usable_cores_follow_the_cpu_affinity():
    if not hasattr(os, "sched_setaffinity"):
        pytest.skip("no CPU affinity on this platform")
    code = "import os; os.sched_setaffinity(0, {sorted(os.sched_getaffinity(0))[0]}); " \
           "from stages.threads import usable_cores; print(usable_cores())"
    assert _python(code).stdout.strip() == "1"


@pytest.mark.parametrize(("files", "cores"), [
    ({"cpu.max": "150000 100000\n"}, 1.5),            # cgroup v2: quota and period in microseconds
    ({"cpu.max": "max 100000\n"}, None),              # v2 without a quota
    ({"cpu.cfs_quota_us": "50000\n", "cpu.cfs_period_us": "100000\n"}, 0.5),   # cgroup v1
    ({"cpu.cfs_quota_us": "-1\n", "cpu.cfs_period_us": "100000\n"}, None),     # v1 without a quota
    ({"cpu.max": "garbage\n"}, None),
    ({}, None),
])
def test_the_cgroup_quota_is_read_as_cores(tmp_path, files, cores):
    for name, text in files.items():
        (tmp_path / name).write_text(text)
    assert threads.quota_cores(tmp_path) == cores


def test_usable_cores_are_capped_by_the_quota_rounded_up(monkeypatch):
    monkeypatch.setattr(threads, "_affinity_cores", lambda: 8)
    monkeypatch.setattr(threads, "_own_quota", lambda: 2.5)
    assert threads.usable_cores() == 3
    monkeypatch.setattr(threads, "_own_quota", lambda: 0.2)
    assert threads.usable_cores() == 1
    monkeypatch.setattr(threads, "_own_quota", lambda: None)
    assert threads.usable_cores() == 8


def test_side_by_side_fits_never_ask_for_more_threads_than_cores():
    for cores in range(1, 9):
        for workers in range(1, 9):
            used, each = threads.share(cores, workers)
            assert 1 <= used <= max(1, min(workers, cores)) and used * each <= cores


@pytest.mark.parametrize("bad", [0, -1, 2.5, "2", True, 10**6])
def test_a_bad_thread_count_is_refused(diabetes_frame, bad):
    with pytest.raises(StageSpecError, match="threads must be a whole number"):
        stages.Chain(diabetes_frame, "target", threads=bad)


def test_a_booster_left_unset_runs_on_the_chains_threads(diabetes_frame):
    chain = stages.Chain(diabetes_frame, "target", threads=1)
    chain.add("hist_tree", 0.5)
    chain.add("lightgbm", 0.5, params={"n_estimators": 3})
    assert [s.learners[0].params["num_threads"] for s in chain.stages] == [1, 1]
    assert chain.stages[0].params["num_threads"] == 0   # what is saved: unset, as the user left it
    own = stages.Chain(diabetes_frame, "target")
    own.add("hist_tree", 0.5, params={"n_jobs": 1})
    assert own.stages[0].learners[0].params["num_threads"] == 1
    default = stages.Chain(diabetes_frame, "target")
    default.add("hist_tree", 0.5)
    assert default.stages[0].learners[0].params["num_threads"] == threads.usable_cores()


SPECS = [
    ("linear", 1.0, {}),
    ("hist_tree", 0.3, {"max_depth": 3}),
    ("hist_tree", 0.3, {"max_depth": 3, "subsample": 0.7}),
    ("lightgbm", 0.5, {"n_estimators": 5, "num_leaves": 7}),
    ("forest", 0.5, {"n_estimators": 12}),
    ("extra_trees", 0.5, {"n_estimators": 12}),
]


def _fit(frame, n_threads, validation):
    chain = stages.Chain(frame, "target", validation, seed=3, threads=n_threads)
    for kind, shrinkage, params in SPECS:
        chain.add(kind, shrinkage, params=params)
    return chain


@pytest.mark.parametrize("validation", [stages.Holdout(fraction=0.25, seed=0), stages.KFold(folds=3, seed=0)])
def test_stages_are_the_same_bits_on_one_thread_and_on_two(diabetes_frame, validation):
    # LightGBM with deterministic=True (the kinds' default) promises the same model on any thread
    # count (LightGBM parameters docs, "deterministic"); scikit-learn's forests draw every tree's seed
    # before growing any (sklearn.ensemble.BaseForest.fit), and predict here on one thread
    one, two = _fit(diabetes_frame, 1, validation), _fit(diabetes_frame, 2, validation)
    for a, b in zip(one.stages, two.stages, strict=True):
        for x, y in zip(a.outputs, b.outputs, strict=True):
            assert np.array_equal(x, y), a.kind
        assert a.scales == b.scales
    # the model text up to the parameters LightGBM appends (num_threads among them)
    texts = [[s.learners[0].booster.model_to_string().split("\nparameters:\n")[0] for s in c.stages
              if s.kind in ("hist_tree", "lightgbm")] for c in (one, two)]
    assert texts[0] == texts[1]
    assert one.table().drop(columns="seconds").equals(two.table().drop(columns="seconds"))


def test_the_recipe_keeps_threads_only_when_set(diabetes_frame):
    chain = stages.Chain(diabetes_frame, "target", threads=1)
    chain.add("linear")
    text = recipe_to_toml(recipe_of_chain(chain))
    assert "threads = 1" in text
    assert parse_recipe(text).threads == 1
    plain = stages.Chain(diabetes_frame, "target")
    plain.add("linear")
    default = recipe_to_toml(recipe_of_chain(plain))
    assert "threads" not in default and parse_recipe(default).threads is None


def test_a_recipe_with_a_bad_thread_count_names_its_line():
    text = '[data]\ntarget = "y"\n\n[chain]\nthreads = 0\n\n[[stage]]\nkind = "linear"\n'
    with pytest.raises(RecipeError, match=r"line 5: threads must be a whole number"):
        parse_recipe(text)


def test_a_recipe_fits_on_its_threads(tmp_path, diabetes_frame):
    data = tmp_path / "diabetes.csv"
    diabetes_frame.to_csv(data, index=False)
    recipe = tmp_path / "r.toml"
    recipe.write_text(f'[data]\npath = "{data.name}"\ntarget = "target"\n\n[chain]\nthreads = 1\n\n'
                      '[[stage]]\nkind = "hist_tree"\nshrinkage = 0.5\n')
    chain = stages.fit_recipe(recipe)
    assert chain.threads == 1 and chain.stages[0].learners[0].params["num_threads"] == 1


def test_audition_candidates_share_the_cores(diabetes_frame):
    chain = stages.Chain(diabetes_frame, "target", threads=2)
    candidates = chain.audition([{"kind": "hist_tree", "shrinkage": 0.5},
                                 {"kind": "hist_tree", "shrinkage": 0.5, "params": {"n_jobs": 4}},
                                 {"kind": "lightgbm", "shrinkage": 0.5, "params": {"n_estimators": 3}}], workers=2)
    # two side by side on two threads: one thread each, even where the user asked for four
    assert [c.stage.learners[0].params["num_threads"] for c in candidates] == [1, 1, 1]
    assert candidates[1].spec.params == {"n_jobs": 4}  # what the user asked for is what is kept
    alone = stages.Chain(diabetes_frame, "target", threads=2)
    alone.add("hist_tree", 0.5, params={"n_jobs": 4})
    assert np.array_equal(candidates[1].stage.outputs[0], alone.outputs()[0])
    assert threads.share(1, 4) == (1, 1)  # one thread: one candidate at a time
