"""The demo's observations file: the shipped data load, say they are invented, and use invented names."""

from __future__ import annotations

import re

import pytest
from tovforge.workflows.demo import INVENTED_DATA, load_observations
from tovforge.errors import InputError

#: The names made up for the demo data (pulsars, then the merger).
INVENTED_NAMES = ("Copper Metronome", "Saffron Kite", "Willow Lantern", "Heron Duet")

#: Shapes of real catalogue designations (pulsar J/B names, merger event names,
#: X-ray source prefixes): an invented name must match none of them.
CATALOGUE_PATTERNS = (
    r"\bPSR\b", r"\b[JB]\d{4}", r"\bGW\d{6}", r"\bGRB\s?\d", r"\bS\d{6}[a-z]", r"\b(4U|XTE|SAX|EXO|RX|KS|SGR|AXP|1E|"
    r"MXB|Swift|MAXI|IGR)\b", r"\bX-\d", r"\bNGC\s?\d", r"\b\d{4}[+-]\d{2,4}\b",
)

#: Real objects of neutron-star astronomy that a made-up name must not reuse
#: (common names and designations; source: memory).
REAL_NAMES = (
    "Crab", "Vela", "Geminga", "Hulse", "Taylor", "Double Pulsar", "Black Widow", "Redback", "Magnificent Seven",
    "Cas A", "Cassiopeia", "Scorpius", "Cygnus", "Hercules", "Her X-1", "Cen X-3", "Aql X-1", "Sco X-1",
    "GW170817", "GW190425", "GW200105", "GW200115", "J0030+0451", "J0740+6620", "J0437-4715", "J0952-0607",
    "J1614-2230", "J0348+0432", "J1748-2446ad", "B1913+16", "J0737-3039", "Terzan",
)


def test_shipped_data_load_with_the_stated_invented_names():
    obs = load_observations()
    assert obs.path == INVENTED_DATA
    assert obs.names == INVENTED_NAMES
    assert len(obs.pulsars) == 3 and len(obs.mergers) == 1
    for p in obs.pulsars:
        assert 1.0 < p.mass_msun < 2.5 and 9.0 < p.radius_km < 16.0
        assert p.mass_sigma_msun > 0 and p.radius_sigma_km > 0 and -1 < p.correlation < 1
    m = obs.mergers[0]
    assert 0 < m.mass_ratio_min < m.mass_ratio_max <= 1 and m.lambda_tilde_sigma > 0


def test_the_file_says_first_that_the_data_are_invented():
    head = INVENTED_DATA.read_text(encoding="utf-8").splitlines()[:3]
    assert head[0].startswith("# INVENTED DATA") and "DEMO" in head[0] and "NOT REAL MEASUREMENTS" in head[0]
    assert "invented" in head[1] or "invented" in head[2]
    note = load_observations().note
    assert note.startswith("Invented data for the tovforge demo") and "not measurements" in note


@pytest.mark.parametrize("name", INVENTED_NAMES)
def test_invented_names_look_like_no_catalogue_name(name):
    for pattern in CATALOGUE_PATTERNS:
        assert not re.search(pattern, name), (name, pattern)
    for real in REAL_NAMES:
        assert real.lower() not in name.lower() and name.lower() not in real.lower(), (name, real)


def test_the_generator_is_inside_the_demo_box():
    from tovforge import eos

    gen = load_observations().generator
    fam = eos.get_family(gen.pop("family"))
    for p in fam.parameters:
        assert p.box[0] <= gen[p.name] <= p.box[1]


GOOD_PULSAR = ('[[pulsar]]\nname = "A"\nmass_msun = 1.4\nmass_sigma_msun = 0.1\nradius_km = 12.0\n'
               'radius_sigma_km = 0.5\n')
GOOD_MERGER = ('[[merger]]\nname = "B"\nchirp_mass_msun = 1.2\nmass_ratio_min = 0.7\nmass_ratio_max = 1.0\n'
               'lambda_tilde = 400.0\nlambda_tilde_sigma = 100.0\n')


def test_a_users_file_of_the_same_layout_loads(tmp_path):
    f = tmp_path / "mine.toml"
    f.write_text(GOOD_PULSAR + GOOD_MERGER)
    obs = load_observations(f)
    assert obs.names == ("A", "B") and obs.pulsars[0].correlation == 0.0 and obs.note == "" and obs.generator == {}


@pytest.mark.parametrize("text, match", [
    (GOOD_PULSAR.replace("mass_msun = 1.4\n", ""), r"bad\.toml: pulsar\[0\]\.mass_msun: missing"),
    (GOOD_PULSAR + "correlation = 1.0\n", r"pulsar\[0\]\.correlation: must be a finite number in \(-1, 1\)\. Got 1"),
    (GOOD_PULSAR.replace("radius_sigma_km = 0.5", "radius_sigma_km = -0.5"),
     r"pulsar\[0\]\.radius_sigma_km: must be a finite number in \(0, inf\)\. Got -0\.5"),
    (GOOD_PULSAR.replace("mass_msun = 1.4", 'mass_msun = "heavy"'),
     r"pulsar\[0\]\.mass_msun: expected a number, got a string \('heavy'\)"),
    (GOOD_PULSAR.replace('name = "A"', 'name = " "'), r"pulsar\[0\]\.name: must not be empty"),
    (GOOD_PULSAR + "colour = 3\n", r"pulsar\[0\]\.colour: unknown key 'colour' in \[pulsar\[0\]\]"),
    (GOOD_PULSAR + "radius = 3\n", r"unknown key 'radius' .*\(did you mean 'radius_km'\?\)"),
    (GOOD_MERGER.replace("mass_ratio_min = 0.7", "mass_ratio_min = 1.2"), r"merger\[0\]: needs 0 < mass_ratio_min"),
    (GOOD_PULSAR + GOOD_PULSAR, r"the name 'A' is used twice"),
    ('note = "nothing"\n', r"no \[\[pulsar\]\] or \[\[merger\]\] table"),
    ("pulsars = 3\n", r"pulsars: unknown key 'pulsars' in the top level \(did you mean 'pulsar'\?\)"),
    ("[pulsar]\nname = 'A'\n", r"pulsar: expected an array, got a table"),
    ("note = 3\n" + GOOD_PULSAR, r"note: expected a string, got an integer"),
    ("[[pulsar]\n", r"not valid TOML"),
])
def test_bad_files_are_refused_with_the_key_path(tmp_path, text, match):
    f = tmp_path / "bad.toml"
    f.write_text(text)
    with pytest.raises(InputError, match=match):
        load_observations(f)


def test_a_missing_file_is_named(tmp_path):
    with pytest.raises(InputError, match=r"nope\.toml: cannot read the observations"):
        load_observations(tmp_path / "nope.toml")


def test_error_budget_flags_measurements_as_sharp_as_the_emulator(tmp_path):
    """Emulator p95 over measurement sigma: R error 25 m against 0.5 km is 0.05 (fine); Lambda error 1 % of
    400 against 100 is 0.04; a 0.1 km radius sigma against a 25 m error is 0.25 and is flagged."""
    from tovforge.workflows.demo._observations import WARN_RATIO, error_budget

    f = tmp_path / "mine.toml"
    f.write_text(GOOD_PULSAR + GOOD_PULSAR.replace('"A"', '"C"').replace("radius_sigma_km = 0.5", "radius_sigma_km = 0.1")
                 + GOOD_MERGER)
    check = {"errors": {"radius_km_at_mass": {"abs_p95": 0.025}, "tidal_deformability_at_mass": {"rel_p95": 0.01}}}
    budget = {b.name: b for b in error_budget(check, load_observations(f))}
    assert budget["A"].quantity == "radius" and budget["A"].ratio == pytest.approx(0.05)
    assert budget["B"].quantity == "lambda_tilde" and budget["B"].ratio == pytest.approx(0.04)
    assert budget["C"].ratio == pytest.approx(0.25)
    assert [n for n, b in budget.items() if b.too_large] == ["C"] and WARN_RATIO == 0.2
