"""Crafted trees never reach a native library: each LightGBM, scikit-learn tree and SVR defect is refused.

LightGBM and scikit-learn walk their trees in C without bounds checks: a model text cut
short, a child index out of range, a cycle, a split feature past the input or a huge class
count crash the process, hang it, or read outside memory (reported against the unchecked
loaders). Every defect below is written into a valid artifact with its checksum and size
recomputed, then all are loaded in one guarded process: each must give ChainFileError with a
one-line message naming the stage, and the process must end by itself (a signal or a hang
fails the test).
"""

from __future__ import annotations

import numpy as np
import pytest
from hostile import (
    edit_lines,
    edit_trees,
    entry_of,
    fix_tree_sizes,
    load_in_guarded_process,
    manifest_of,
    members_of,
    remnant,
    with_member,
)

import stages
from stages.kinds.base import Artifact
from stages.lightgbm_text import check_model_text

LEAF = -1


def _first_number(values: str, new: str) -> str:
    parts = values.split(" ")
    parts[0] = new
    return " ".join(parts)


def _second_is_itself(values: str) -> str:
    parts = values.split(" ")
    parts[1] = "1"  # internal node 1 becomes its own left child: a loop
    return " ".join(parts)


#: LightGBM defects: (name, edit of the model text, words of the refusal)
LIGHTGBM_DEFECTS = [
    ("cut-at-a-quarter", lambda t: t[: len(t) // 4], "cut short"),
    ("cut-in-the-trees", lambda t: t[: t.index("Tree=0") + 40], "cut"),
    ("cut-before-the-end", lambda t: t[: t.index("end of trees")], "cut short"),
    ("a-length-changing-edit", lambda t: edit_lines(t, "leaf_value", lambda v: _first_number(v, "1.50000")),
     "tree sizes do not match"),
    ("child-out-of-range", lambda t: fix_tree_sizes(edit_lines(t, "left_child", lambda v: _first_number(v, "99"))),
     "child index 99"),
    ("leaf-out-of-range", lambda t: fix_tree_sizes(edit_lines(t, "right_child", lambda v: _first_number(v, "-99"))),
     "child index -99"),
    ("root-as-its-own-child", lambda t: fix_tree_sizes(edit_lines(t, "left_child", lambda v: _first_number(v, "0"))),
     "root as a child"),
    ("a-node-as-its-own-child", lambda t: fix_tree_sizes(edit_lines(t, "left_child", _second_is_itself)),
     "child of 2 nodes"),
    ("split-feature-past-the-schema",
     lambda t: fix_tree_sizes(edit_lines(t, "split_feature", lambda v: _first_number(v, "100000"))),
     "splits on feature 100,000"),
    ("a-million-classes", lambda t: edit_lines(t, "num_class", lambda v: "1000000", tree=None), "1,000,000 classes"),
    ("nan-leaf", lambda t: fix_tree_sizes(edit_lines(t, "leaf_value", lambda v: _first_number(v, "nan"))),
     "leaf value that is not a finite number"),
    ("infinite-threshold", lambda t: fix_tree_sizes(edit_lines(t, "threshold", lambda v: _first_number(v, "inf"))),
     "threshold that is not a finite number"),
    ("a-billion-leaves", lambda t: fix_tree_sizes(edit_lines(t, "num_leaves", lambda v: "1000000000")),
     "1,000,000,000 leaves"),
    ("underscored-number", lambda t: fix_tree_sizes(edit_lines(t, "left_child", lambda v: _first_number(v, "1_0"))),
     "not plainly written"),
    ("hex-number", lambda t: fix_tree_sizes(edit_lines(t, "threshold", lambda v: _first_number(v, "0x10"))),
     "not plainly written"),
    ("a-nul-byte", lambda t: t.replace("num_leaves=", "num_leaves=\x00", 1), "NUL"),
    ("carriage-returns", lambda t: t.replace("\n", "\r\n"), "carriage-return"),
    ("more-features-than-the-stage", lambda t: edit_lines(t, "max_feature_idx", lambda v: "1000", tree=None),
     "reads 1,001 features"),
    ("categorical-split-outside-its-sets",
     lambda t: fix_tree_sizes(edit_lines(t, "decision_type", lambda v: _first_number(v, "1"))), "categorical split"),
    ("an-unknown-header-line", lambda t: t.replace("version=v4", "version=v4\nsurprise=1", 1), "unknown"),
    ("trees-out-of-order", lambda t: fix_tree_sizes(t.replace("Tree=0", "Tree=7", 1)), "expected 'Tree=0'"),
    ("junk-after-the-trees", lambda t: t.replace("pandas_categorical:null", "pandas_categorical:[" * 5000, 1),
     "unexpected line"),
    ("not-utf8", lambda t: "\udcff", "not UTF-8"),
]


def _shared_node(tree) -> None:
    nodes = tree["nodes"]
    nodes["left_child"][0] = nodes["right_child"][0]  # one node, two parents: not a tree


def _cut_off_cycle(tree) -> None:
    """Rewire the tree so that the root has two leaves and every other node forms a loop: each node still has
    exactly one parent, but the root reaches none of them."""
    nodes = tree["nodes"]
    n = len(nodes)
    internal = list(range(3, 3 + (n - 3) // 2))
    children = [*range(4, n), 3]  # node 3 comes last: the child of the last internal node, closing the loop
    feature, threshold = nodes["feature"][0], nodes["threshold"][0]
    nodes["left_child"][:], nodes["right_child"][:] = LEAF, LEAF
    nodes["feature"][:], nodes["threshold"][:] = -2, -2.0
    for node, (left, right) in zip([0, *internal], [(1, 2), *zip(children[::2], children[1::2], strict=True)],
                                   strict=True):
        nodes["left_child"][node], nodes["right_child"][node] = left, right
        nodes["feature"][node], nodes["threshold"][node] = feature, threshold


#: scikit-learn tree defects: (name, edit of the tree's arrays, words of the refusal)
TREE_DEFECTS = [
    ("child-at-ten-million", lambda t: t["nodes"]["left_child"].__setitem__(0, 10_000_000), "child index 10,000,000"),
    ("root-as-its-own-child", lambda t: t["nodes"]["left_child"].__setitem__(0, 0), "root as a child"),
    ("feature-100000", lambda t: t["nodes"]["feature"].__setitem__(0, 100_000), "splits on feature 100,000"),
    ("negative-feature", lambda t: t["nodes"]["feature"].__setitem__(0, -5), "splits on feature -5"),
    ("nan-threshold", lambda t: t["nodes"]["threshold"].__setitem__(0, np.nan), "threshold"),
    ("infinite-value", lambda t: t["values"].__setitem__((1, 0, 0), np.inf), "leaf value"),
    ("fewer-nodes-claimed-than-held", lambda t: t.__setitem__("node_count", 3), "says it has 3 nodes"),
    ("a-node-with-two-parents", _shared_node, "as the child of"),
    ("a-loop-cut-off-from-the-root", _cut_off_cycle, "does not reach"),
    ("wider-than-the-stage", lambda t: t.__setitem__("n_features", 500), "500 features"),
    ("two-outputs", lambda t: t.__setitem__("n_outputs", 2), "2 outputs"),
    ("a-huge-output-count", lambda t: t.__setitem__("n_outputs", 2**40), "outputs"),
    ("a-depth-beyond-its-nodes", lambda t: t.__setitem__("max_depth", 10**9), "deep"),
]

TREE_KINDS = ("tree", "forest", "sklearn:sklearn.ensemble.GradientBoostingRegressor")


@pytest.fixture(scope="module")
def defect_files(base_chain, tmp_path_factory):
    """Return (path, expected words) for every defect, in every kind that carries that structure."""
    folder = tmp_path_factory.mktemp("hostile-structures")
    members, manifest = members_of(base_chain), manifest_of(base_chain)
    files = []
    for kind in ("lightgbm", "hist_tree"):
        text = members[entry_of(manifest, kind)["member"]].decode()
        for name, edit, words in LIGHTGBM_DEFECTS:
            payload = edit(text).encode("utf-8", "surrogateescape")
            files.append((with_member(base_chain, folder / f"{kind}-{name}.chain", kind, payload), words))
    for kind in TREE_KINDS:
        payload = members[entry_of(manifest, kind)["member"]]
        for name, edit, words in TREE_DEFECTS:
            target = folder / f"{kind.replace(':', '_')}-{name}.chain"
            files.append((with_member(base_chain, target, kind, edit_trees(payload, edit)), words))
    return files


def test_every_defect_is_refused_without_a_crash_or_a_hang(defect_files):
    reports = load_in_guarded_process([path for path, _ in defect_files])
    wrong = []
    for path, words in defect_files:
        report = reports[str(path)]
        message = report["message"]
        if report["outcome"] != "ChainFileError" or "\n" in message or "stage" not in message or words not in message:
            wrong.append((path.name, report["outcome"], message[-160:]))
    assert not wrong, "\n".join(map(str, wrong))


def test_the_untouched_artifacts_load_and_predict(base_chain, diabetes_rows):
    fitted = stages.load(base_chain)
    assert np.isfinite(fitted.predict(diabetes_rows)).all()


def test_a_million_classes_are_refused_before_lightgbm_allocates(base_chain, tmp_path):
    text = members_of(base_chain)[entry_of(manifest_of(base_chain), "lightgbm")["member"]].decode()
    with pytest.raises(stages.ChainFileError, match="1,000,000 classes"):
        check_model_text(edit_lines(text, "num_class", lambda v: "1000000", tree=None), 11)


def test_lightgbm_never_prints_its_own_fatal_line_before_ours(base_chain, tmp_path):
    # a text the checks pass but LightGBM itself refuses: its [Fatal] line must not reach the terminal
    from stages.kinds import get_kind

    text = members_of(base_chain)[entry_of(manifest_of(base_chain), "lightgbm")["member"]].decode()
    odd = text.replace("objective=regression", "objective=nonsense", 1)  # LightGBM: "[Fatal] Unknown objective"
    with pytest.raises(stages.ChainFileError, match="not a LightGBM model .*Unknown objective"):
        get_kind("lightgbm").load(Artifact("lgb", odd.encode(), {}, n_features=11))
    path = with_member(base_chain, tmp_path / "odd.chain", "lightgbm", odd.encode())
    done = remnant("show", path)
    assert "[LightGBM]" not in done.stdout and "[LightGBM]" not in done.stderr
    assert done.returncode == 2 and len(done.stderr.splitlines()) == 1, done.stderr


def test_a_crafted_svr_is_refused(base_chain, tmp_path):
    import io
    import json
    import zipfile

    import skops.io as sio

    kind = "sklearn:sklearn.svm.SVR"
    payload = members_of(base_chain)[entry_of(manifest_of(base_chain), kind)["member"]]
    model = sio.loads(payload, trusted=sio.get_untrusted_types(data=payload))
    model.support_vectors_ = model.support_vectors_[:3]  # libsvm would read past the three rows it was given
    model._n_support = np.array([3, 3], dtype=np.int32)
    crafted = sio.dumps(model)
    meta = entry_of(manifest_of(base_chain), kind)["meta"]
    path = with_member(base_chain, tmp_path / "svr.chain", kind, crafted, meta)
    with pytest.raises(stages.ChainFileError, match="support vectors have shape"):
        stages.load(path)
    with zipfile.ZipFile(io.BytesIO(crafted)) as archive:
        assert "schema.json" in archive.namelist() and json.loads(archive.read("schema.json"))
