"""Training sets smaller than the quadratic trend are refused (issue 16)."""

from __future__ import annotations

import pytest

from surrogate_helpers import synthetic
from tovforge.errors import InputError
from tovforge.surrogate import train_on


@pytest.mark.parametrize("kind", ["gp", "spline"])
def test_fewer_points_than_the_trend_terms_are_refused_with_the_minimum(kind):
    """Issue 16: 11 usable points of 4 parameters (the quadratic trend has 15 terms) trained with a raw
    SciPy warning (spline) or silently, with length scales at their bounds (GP)."""
    with pytest.raises(InputError, match=r"at least 15 usable points for 4 parameters .* the grid has 11"):
        train_on(synthetic(11), kind)


def test_as_many_points_as_terms_train():
    model = train_on(synthetic(15), "spline")
    assert model.meta.training.n_train == 15
