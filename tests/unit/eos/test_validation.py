"""Bad parameters raise one ValueError subclass that names parameter, value and range."""

from __future__ import annotations

import re

import numpy as np
import pytest

from tovforge import eos
from tovforge.errors import InvalidEOSParameter, UnknownFamily

from helpers import READ2009

GOOD = READ2009["SLy"]


@pytest.mark.parametrize(
    "change, match",
    [
        ({"gamma1": 1.0}, "The 'gamma1' parameter of piecewise-polytrope must be in (1, 10]. Got 1 instead."),
        ({"gamma2": 0.5}, "The 'gamma2' parameter of piecewise-polytrope must be in (1, 10]. Got 0.5 instead."),
        ({"gamma3": float("nan")}, "Got nan instead"),
        ({"log_p1": float("inf")}, "Got inf instead"),
        ({"log_p1": 40.0}, "The 'log_p1' parameter of piecewise-polytrope must be in [33, 36]"),
        ({"gamma4": 2.0}, "piecewise-polytrope has no parameter 'gamma4'"),
    ],
)
def test_bad_parameters_are_named(change, match):
    with pytest.raises(InvalidEOSParameter, match=re.escape(match)):
        eos.make("piecewise-polytrope", **{**GOOD, **change})


def test_missing_parameter():
    bad = dict(GOOD)
    del bad["gamma3"]
    with pytest.raises(InvalidEOSParameter, match="needs parameter 'gamma3'"):
        eos.make("piecewise-polytrope", **bad)


def test_unknown_family_lists_the_known_ones():
    with pytest.raises(UnknownFamily, match="Unknown EOS family 'piecewise'; choose one of: piecewise-polytrope"):
        eos.make("piecewise")


def test_joint_constraint_crust_join():
    with pytest.raises(InvalidEOSParameter, match="joins the crust"):
        eos.make("piecewise-polytrope", log_p1=33.1, gamma1=1.5, gamma2=3, gamma3=3)


def test_spectral_gamma_range_is_enforced():
    with pytest.raises(InvalidEOSParameter, match=r"spectral Gamma\(x\) must stay in \[0.6, 4.5\]"):
        eos.make("spectral", gamma0=1.0, gamma1=0.5, gamma2=0.1, gamma3=0.0)


@pytest.mark.parametrize("family", ["piecewise-polytrope", "spectral", "sound-speed", "polytrope"])
def test_every_parameter_out_of_range_is_reported(family):
    """Bounds are data: one loop makes an out-of-range value for every parameter."""
    fam = eos.get_family(family)
    good = {p.name: 0.5 * (p.box[0] + p.box[1]) for p in fam.parameters}
    for p in fam.parameters:
        lo, hi = p.allowed
        bad_value = hi + abs(hi) + 1.0
        with pytest.raises(InvalidEOSParameter, match=re.escape(f"The {p.name!r} parameter of {fam.name}")):
            fam(**{**good, p.name: bad_value})


def test_validate_rows_reports_without_raising():
    fam = eos.get_family("piecewise-polytrope")
    theta = np.array([[34.4, 3.0, 3.0, 3.0], [34.4, 0.9, 3.0, 3.0], [34.4, 3.0, np.nan, 3.0]])
    msgs = fam.validate_rows(theta)
    assert msgs[0] == ""
    assert "gamma1" in msgs[1] and "gamma2" in msgs[2]


@pytest.mark.parametrize("theta, advice, step", [
    ((35.0, 2.0, 3.0, 3.0), "lower log_p1 or raise gamma1", -1),  # joins the crust too low (issue 16)
    ((33.5, 2.0, 3.0, 3.0), "raise log_p1 or gamma1", +1),        # joins the crust above 10^14.7 g/cm^3
])
def test_crust_join_advice_is_the_direction_that_solves_it(theta, advice, step):
    """Issue 16: 'raise log_p1 or gamma1' was given for both failures; for log_p1=35, gamma1=2 raising
    log_p1 makes it worse.  Each message's advice, followed along log_p1 alone, reaches a valid EOS;
    the other direction does not."""
    fam = eos.get_family("piecewise-polytrope")
    msg = fam.validate_rows(np.array([theta]))[0]
    assert msg.endswith(advice + ".") and "log_p1=" in msg
    moved = np.array([theta] * 8)
    moved[:, 0] += step * 0.05 * np.arange(1, 9)  # log_p1 in steps of 0.05 the advised way
    assert any(m == "" for m in fam.validate_rows(moved))
    against = np.array([theta] * 8)
    against[:, 0] -= step * 0.05 * np.arange(1, 9)
    against = against[(against[:, 0] >= 33) & (against[:, 0] <= 36)]
    assert all(m != "" for m in fam.validate_rows(against))
