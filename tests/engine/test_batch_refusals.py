"""A batch of samples of one wiring refuses as checking them one by one refuses: the
error raised is the first one a sample-by-sample preparation raises (the batch checks
the terms' values for overflow, LW406, for all samples at once)."""
from __future__ import annotations

import itertools

import pytest

from loopwise.engine.batch import Batch
from loopwise.engine.stability import prepare
from loopwise.errors import ModelError
from loopwise.testing import prepare_text

LOOPS = {
    "fine": "[2/((s + 1)*(0.1*s + 1))](e)",
    "overflow": "[1e210/(s + 1)](e)",         # certified, but |L| = 1e210 on the axis (LW406)
    "range": "[1e299/(s + 1e-140)](e)",      # no radius within double precision (LW406)
    "neutral": "[2*exp(-0.1*s)](e)",           # a delayed gain of 2 at every frequency (LW401)
}


def _reduction(loop: str):
    return prepare_text(f"model m\ninput r\ne = r - y\ny = {loop}\nbreak b at y\n").reduction


def _one_by_one(reds):
    for red in reds:
        prepare(red, "right", False)


@pytest.mark.parametrize("order", list(itertools.permutations(LOOPS, 3)) + [(n, n) for n in LOOPS if n != "fine"])
def test_the_batch_raises_the_error_the_one_by_one_preparation_raises_first(order):
    reds = [_reduction(LOOPS[name]) for name in order]
    with pytest.raises(ModelError) as alone:
        _one_by_one(reds)
    with pytest.raises(ModelError) as batched:
        Batch(reds).count()
    assert (batched.value.code, str(batched.value)) == (alone.value.code, str(alone.value))


def test_a_batch_of_fine_samples_is_counted():
    counts = Batch([_reduction(LOOPS["fine"]), _reduction(LOOPS["fine"].replace("2/", "3/"))]).count()
    assert [c.Z for c in counts] == [0, 0]
