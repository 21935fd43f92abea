"""The windings round block poles that find hidden closed-loop poles (engine/hidden.py),
done for a batch's samples at once (Batch.circle_orders), against the same winding done
for each sample alone (hidden._order, through its own Reduction.characteristic), and the
modes the batched check reports against the one-model check's."""
from __future__ import annotations

import pytest

from loopwise.analysis import check_many, check_prepared
from loopwise.engine.batch import Batch
from loopwise.engine.hidden import _order, circles
from loopwise.testing import prepare_text

#: invented: a PI controller against plants with a zero at the origin, an undamped pair,
#: a right-half-plane pole its controller cancels, and a plain integrator
WIRINGS = {
    "origin": ("u = [{k}*(s + {a})/s](e)", "y = [s/((s + 1)*(s + {b}))](u)"),
    "notch": ("u = [{k}*(s^2 + {a}^2)/((s + 1)*(s + 2))](e)", "y = [1/((s^2 + {a}^2)*(s + {b}))](u)"),
    "rhp": ("u = [{k}*(s - 1)/(s + {a})](e)", "y = [1/((s - 1)*(s + {b}))](u)"),
    "integrator": ("u = [{k}*(s + {a})/(s + 5)](e)", "y = [1/(s*(s + {b}))](u)"),
}
VALUES = [(0.5, 1.0, 2.0), (2.0, 0.5, 3.0), (5.0, 2.0, 0.7), (1.0, 3.0, 1.5)]


def _preps(name: str):
    u, y = WIRINGS[name]
    return [prepare_text("model m\ninput r\ne = r - y\n" + u.format(k=k, a=a, b=b) + "\n"
                         + y.format(k=k, a=a, b=b) + "\nbreak loop at y\n") for k, a, b in VALUES]


@pytest.mark.parametrize("name", sorted(WIRINGS))
def test_the_batched_windings_are_those_of_each_sample_alone(name):
    reds = [p.reduction for p in _preps(name)]
    known = Batch(reds).circle_orders([circles(r) for r in reds])
    assert sum(len(k) for k in known) > 0
    for red, k in zip(reds, known):
        assert set(k) <= set(circles(red))
        for c, found in k.items():
            assert found == _order(red, *c)


@pytest.mark.parametrize("name", sorted(WIRINGS))
def test_the_batched_check_reports_the_hidden_modes_the_one_model_check_reports(name):
    preps = _preps(name)
    for alone, batched in zip([check_prepared(p) for p in preps], check_many(preps)):
        modes = [[(m.code, m.pole, m.multiplicity) for m in r.hidden_modes] for r in (batched, alone)]
        assert modes[0] == modes[1]
        assert [(b.stable, b.marginal) for b in batched.breaks] == [(b.stable, b.marginal) for b in alone.breaks]
