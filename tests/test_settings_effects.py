"""The [effects] table and the effect strengths in the settings file.

Unit tests of validation: each asserts the parsed value against the value
written in the test's own settings text (TOML syntax: toml.io v1.0.0).
"""

import pytest

from deepwell.core.errors import SettingsError
from deepwell.tables.effects import Effects, effects_from_args, parse_effects
from deepwell.tables.settings import Settings, load_settings, parse_settings


def test_defaults_are_romer_exact_redshift_and_precession_with_unit_strengths():
    s = Settings()
    fx = s.effect_switches()
    assert (fx.romer, fx.redshift, fx.precession, fx.extended_mass) == (True, "exact", True,
                                                                         False)
    assert fx.extra_names == ("f", "f_sp")
    for name in ("f", "f_sp"):  # general relativity: f = f_sp = 1, held fixed
        assert s.shared_setting(name).value == 1.0
        assert s.shared_setting(name).fixed is True
    assert s.shared_setting("ext_fraction").value == 0.0
    assert s.shared_setting("ext_fraction").fixed is False


def test_effects_table_is_read(tmp_path):
    path = tmp_path / "s.toml"
    path.write_text('[effects]\nromer = false\nredshift = "first-order"\nprecession = false\n'
                    'extended_mass = true\nextended_scale = 750.0\nreference_radius = 1500.0\n'
                    '[shared.f]\nfixed = false\nprior = { mean = 1.0, sigma = 0.5 }\n')
    s = load_settings(path)
    fx = s.effect_switches()
    assert fx == Effects(romer=False, redshift="first-order", precession=False,
                         extended_mass=True, extended_scale=750.0, reference_radius=1500.0)
    assert fx.extra_names == ("f", "ext_fraction")
    f = s.shared_setting("f")
    assert (f.value, f.fixed, f.prior_mean, f.prior_sigma) == (1.0, False, 1.0, 0.5)


def test_value_alone_holds_an_effect_strength_at_that_value():
    s = parse_settings({"shared": {"f_sp": {"value": 0.0}}})
    assert (s.shared_setting("f_sp").value, s.shared_setting("f_sp").fixed) == (0.0, True)


@pytest.mark.parametrize(("table", "column"), [
    ({"romer": "yes"}, "effects.romer"),
    ({"redshift": "half"}, "effects.redshift"),
    ({"precession_stars": "some"}, "effects.precession_stars"),
    ({"extended_mass": True}, "effects.extended_scale"),
    ({"extended_scale": -5.0}, "effects.extended_scale"),
    ({"steps_per_orbit": 4}, "effects.steps_per_orbit"),
    ({"lensing": True}, "effects.lensing"),
])
def test_bad_effects_entry_names_its_key(table, column):
    with pytest.raises(SettingsError) as info:
        parse_settings({"effects": table})
    assert info.value.column == column


def test_unknown_shared_name_is_still_refused():
    with pytest.raises(SettingsError) as info:
        parse_settings({"shared": {"upsilon": {"value": 1.0}}})
    assert info.value.column == "shared.upsilon"


def test_command_line_overrides():
    base = parse_settings({"effects": {"redshift": "first-order"}})
    s = effects_from_args(base, romer=False, fit_f=True)
    fx = s.effect_switches()
    assert (fx.romer, fx.redshift, fx.precession) == (False, "first-order", True)
    assert s.shared_setting("f").fixed is False and s.shared_setting("f").value == 1.0
    n = effects_from_args(base, newtonian=True)
    assert n.effect_switches() == Effects.newtonian()
    assert n.effect_switches().extra_names == ()
    with pytest.raises(SettingsError):
        effects_from_args(base, redshift="sometimes")


def test_parse_effects_of_nothing_is_the_default():
    assert parse_effects({}) == Effects() == parse_effects(None)
