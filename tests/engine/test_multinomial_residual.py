"""The multinomial pseudo-residual 1[y = k] - p_k: scikit-learn's compiled loss (what
GradientBoostingClassifier's gradient is) and our own softmax with the C library's exp give the
same bits, so the faster one may be used without changing any chain."""

from __future__ import annotations

import numpy as np

from stages import multinomial
from stages.metrics import one_hot
from stages.multinomial import MultinomialLoss, stable_probabilities


def test_the_compiled_residual_equals_our_own_bit_for_bit():
    rng = np.random.default_rng(0)
    for n_classes in (3, 10):
        raw = rng.standard_normal((5000, n_classes)) * 4
        raw[:50] *= 200  # probabilities that underflow to 0 and saturate at 1
        y = rng.integers(0, n_classes, len(raw))
        ours = one_hot(y, n_classes) - stable_probabilities(raw)
        assert multinomial._compiled_loss(n_classes) is not None
        np.testing.assert_array_equal(MultinomialLoss(n_classes=n_classes).residual(y, raw), ours)
        assert not np.signbit(MultinomialLoss(n_classes=n_classes).residual(y, raw)[ours == 0]).any()


def test_without_the_compiled_loss_the_residual_is_our_own(monkeypatch):
    rng = np.random.default_rng(1)
    raw, y = rng.standard_normal((200, 4)), rng.integers(0, 4, 200)
    compiled = MultinomialLoss(n_classes=4).residual(y, raw)
    monkeypatch.setattr(multinomial, "_compiled_loss", lambda n_classes: None)
    np.testing.assert_array_equal(MultinomialLoss(n_classes=4).residual(y, raw), compiled)
