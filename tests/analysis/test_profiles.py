"""Tests of rundash/analysis/profiles.py: shipped profiles, rule values, validation."""

import pytest
from numpy.testing import assert_allclose

from rundash.analysis.profiles import required_margin_pct
from rundash.ingest.profile_file import list_profiles, load_profile
from rundash.errors import ConfigError


def test_shipped_profiles():
    assert list_profiles() == ("api610", "api612", "api617", "fixed-margin")
    for name in list_profiles():
        p = load_profile(name)
        assert p.name == name
        assert p.margin.source.confidence in ("stated", "from memory", "by analogy")
        for lim in p.limits:
            assert lim.source.document and lim.source.edition and lim.source.clause
    assert load_profile("api612").margin.source.confidence == "by analogy"
    assert load_profile("api610").needs_confirmation


@pytest.mark.parametrize("af, below, above", [
    # check values derived from the API 617-style rule (DEVELOPERS.md "Reference values", from memory):
    # below min(16, 17(1 - 1/(AF-1.5))), above min(26, 10 + 17(1 - 1/(AF-1.5)))
    (3.0, 5.667, 15.667), (5.0, 12.143, 22.143), (10.0, 15.000, 25.000),
    (18.5, 16.0, 26.0), (40.0, 16.0, 26.0),
])
@pytest.mark.parametrize("name", ["api617", "api612"])
def test_af_rule_check_values(name, af, below, above):
    p = load_profile(name)
    assert_allclose(required_margin_pct(p, af, "below"), below, atol=5e-4)
    assert_allclose(required_margin_pct(p, af, "above"), above, atol=5e-4)


def test_critically_damped_and_unknown_af():
    p = load_profile("api617")
    assert required_margin_pct(p, 2.4, "below") == 0.0  # AF < 2.5: no margin required
    assert required_margin_pct(p, None, "above") == 26.0  # unknown AF: most demanding


def test_fixed_and_damping_exemption():
    f = load_profile("fixed-margin")
    assert required_margin_pct(f, 8.0, "below") == 15.0
    assert required_margin_pct(f, 8.0, "above") == 20.0
    pump = load_profile("api610")
    # API 610-style (from memory, low confidence): 20 % unless damping factor >= 0.15
    assert required_margin_pct(pump, 6.0, "below", damping_ratio=0.05) == 20.0
    assert required_margin_pct(pump, 6.0, "above", damping_ratio=0.15) == 0.0


def test_api_shaft_limit():
    lim = load_profile("api617").limits[0]
    # min(25.4, 25.4 sqrt(12000/N_mc)) um p-p (API 617 style, from memory)
    assert_allclose(lim.value(10000.0), 25.4)
    assert_allclose(lim.value(16000.0), 25.4 * (12000 / 16000) ** 0.5)


_GOOD = """
name = "plant-x"
title = "purchase spec"
[margin]
rule = "af-curve"
no_margin_below_af = 2.5
document = "PS-123"
edition = "rev B"
clause = "7.2"
confidence = "stated"
[margin.below]
base_pct = 0.0
coefficient_pct = 17.0
af_offset = 1.5
cap_pct = 12.0
[margin.above]
base_pct = 10.0
coefficient_pct = 17.0
af_offset = 1.5
cap_pct = 30.0
"""


def test_user_profile(tmp_path):
    f = tmp_path / "spec.toml"
    f.write_text(_GOOD)
    p = load_profile(f)
    assert p.name == "plant-x" and p.margin.source.confidence == "stated"
    assert required_margin_pct(p, 40.0, "below") == 12.0
    assert_allclose(required_margin_pct(p, 3.0, "below"), 5.667, atol=5e-4)
    assert load_profile(str(f)).name == "plant-x"


@pytest.mark.parametrize("old, new, key", [
    ('cap_pct = 12.0', 'cap_pc = 18.0', "margin.below.cap_pc"),
    ('confidence = "stated"', 'confidence = "sure"', "confidence"),
    ('rule = "af-curve"', 'rule = "sliding"', "margin.rule"),
    ('cap_pct = 30.0', 'cap_pct = -3.0', "margin.above.cap_pct"),
    ('af_offset = 1.5\ncap_pct = 12.0', 'af_offset = "x"\ncap_pct = 12.0', "margin.below.af_offset"),
    ('title = "purchase spec"', 'title = "purchase spec"\ncolour = "red"', "colour"),
    ('[margin.above]', '[margin.sideways]', "margin.sideways"),
])
def test_validation_names_the_key(tmp_path, old, new, key):
    f = tmp_path / "bad.toml"
    text = _GOOD.replace(old, new, 1)
    assert text != _GOOD
    f.write_text(text)
    with pytest.raises(ConfigError, match=key.replace(".", r"\.")):
        load_profile(f)


def test_unknown_profile_and_bad_toml(tmp_path):
    with pytest.raises(ConfigError, match="Invalid value for 'profile'"):
        load_profile("api999")
    f = tmp_path / "broken.toml"
    f.write_text("name = ")
    with pytest.raises(ConfigError, match="not valid TOML"):
        load_profile(f)
    with pytest.raises(ConfigError, match="missing table 'margin'"):
        f.write_text('name = "x"')
        load_profile(f)
    with pytest.raises(ConfigError, match="Invalid value for 'side'"):
        required_margin_pct("api617", 5.0, "left")


def test_confidence_said_once_with_what_to_confirm():
    # every rule of the API 617-style profile is from memory: the profile says so, once,
    # naming each rule and its document; a profile of stated rules says nothing
    p = load_profile("api617")
    assert p.needs_confirmation
    note = p.confidence_note()
    assert note.startswith("Guidance profile 'api617': its values are from memory, not "
                           "checked against the text of the standard.")
    assert "the separation-margin rule (API 617" in note
    assert "Unfiltered shaft vibration p-p" in note
    import dataclasses

    stated = dataclasses.replace(p.margin.source, confidence="stated")
    q = dataclasses.replace(p, needs_confirmation=False, limits=(),
                            margin=dataclasses.replace(p.margin, source=stated))
    assert q.confidence_note() is None
