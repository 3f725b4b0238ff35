"""Tests for geosoil.spreader: minimum rate, equal passes, rate step, passes or seasons.

Each check names its source beside it; other checks are properties.
"""

from __future__ import annotations

import numpy as np
import pytest
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

from geosoil.errors import RateWarning, SettingsError
from geosoil.settings import from_mapping
from geosoil.spreader import (
    COMMON_MAX_PER_PASS_KG_HA,
    SpreaderSettings,
    apply_spreader_limits,
    pass_schedule,
    split_passes,
    spreader_passes,
    unsplit_pass_warning,
)
from geosoil.units import kg_ha_to_lb_ac, lb_ac_to_kg_ha

HYP = settings(max_examples=60, deadline=None, suppress_health_check=[HealthCheck.too_slow])


def test_split_passes() -> None:
    assert split_passes(6000.0, 2500.0) == (3, 2000.0)
    assert split_passes(2500.0, 2500.0) == (1, 2500.0)
    assert split_passes(0.0, 2500.0) == (0, 0.0)
    n, per = split_passes(np.array([100.0, 5001.0, np.nan]), 2500.0)
    assert n.tolist() == [1, 3, 0]
    assert per[0] == 100.0 and per[1] == pytest.approx(1667.0) and np.isnan(per[2])
    assert split_passes(9000.0, 0.0) == (1, 9000.0)


def test_spreader_minimum_maximum_and_step() -> None:
    sp = SpreaderSettings(unit="t/ha", min_rate=0.5, max_per_pass=2.5, rate_step=0.25)
    with pytest.warns(RateWarning):
        out = apply_spreader_limits(np.array([0.0, 400.0, 1080.0, 6100.0, np.nan]), sp)
    assert out[0] == 0 and out[1] == 0  # below the minimum spreadable rate
    assert out[2] == pytest.approx(1000.0)  # 1.08 t/ha rounds to 1.00 (step 0.25)
    assert out[3] == pytest.approx(6000.0)  # 3 passes of 2.0 t/ha
    assert np.isnan(out[4])


def test_spreader_rounding_modes() -> None:
    up = SpreaderSettings(rate_step=100, rounding="up")
    down = SpreaderSettings(rate_step=100, rounding="down")
    assert apply_spreader_limits(np.array([1210.0]), up)[0] == 1300.0
    assert apply_spreader_limits(np.array([1290.0]), down)[0] == 1200.0
    assert apply_spreader_limits(np.array([300.0]), down)[0] == 300.0  # exact multiple stays


def test_spreader_in_lb_per_acre_is_exact() -> None:
    # [derived] 1 lb/ac = 515445875/459870048 kg/ha exactly (= 1.1208511562...; NIST SP 811:
    # 1 lb = 0.45359237 kg, 1 acre = 4046.8564224 m2, both exact by definition)
    sp = SpreaderSettings(unit="lb/ac", rate_step=50, min_rate=100)
    assert sp.rate_step_kg_ha == pytest.approx(50 * 515445875 / 459870048, rel=1e-15)
    out = apply_spreader_limits(np.array([float(lb_ac_to_kg_ha(1234.0))]), sp)
    assert float(kg_ha_to_lb_ac(out[0])) == pytest.approx(1250.0, rel=1e-12)


@given(lb=st.floats(0, 1e6))
@HYP
def test_lb_ac_and_kg_ha_round_trip(lb: float) -> None:
    assert float(kg_ha_to_lb_ac(lb_ac_to_kg_ha(lb))) == pytest.approx(lb, rel=1e-12, abs=1e-9)


@given(rate=st.floats(0, 20_000), lo=st.floats(0, 1000), hi=st.floats(1000, 4000),
       step=st.sampled_from([0.0, 10.0, 50.0, 100.0, 250.0]))
@HYP
def test_spreader_passes_respect_the_machine(rate: float, lo: float, hi: float,
                                             step: float) -> None:
    sp = SpreaderSettings(min_rate=lo, max_per_pass=hi, rate_step=step)
    n, per = spreader_passes(rate, sp)
    if rate < lo or per == 0:
        assert n == 0 or per == 0
        return
    assert n >= 1
    assert per <= hi + 1e-9
    assert per >= lo - 1e-9
    if step:
        assert per / step == pytest.approx(round(per / step), abs=1e-9)
    assert n == split_passes(rate, hi)[0]


def test_pass_schedule_names_passes_or_seasons_in_the_spreader_unit() -> None:
    # 6.1 t/ha at most 2.5 t/ha a pass: 3 passes of 2.03, rounded to 2.0 t/ha [derived]
    sp = SpreaderSettings(unit="t/ha", min_rate=0.5, max_per_pass=2.5, rate_step=0.25)
    n, per = spreader_passes(6100.0, sp)
    assert pass_schedule(n, per, sp) == "3 passes of 2.0 t/ha"
    seasons = SpreaderSettings(unit="t/ha", max_per_pass=2.5, split_into="seasons")
    assert pass_schedule(*spreader_passes(4000.0, seasons), seasons) == "2 seasons of 2.0 t/ha"
    assert pass_schedule(1, 2000.0, seasons) == "" and pass_schedule(0, 0.0, seasons) == ""
    lb = SpreaderSettings(unit="lb/ac")
    # 2 x 1000 lb/ac: the rate per pass is shown back in lb/ac (exact factor, NIST SP 811)
    assert pass_schedule(2, float(lb_ac_to_kg_ha(1000.0)), lb) == "2 passes of 1,000 lb/ac"
    # shown in the run's rate unit (a t/ha spreader, a report in lb/ac): 2500 kg/ha per pass
    # / 1.12085116 kg/ha per lb/ac (NIST SP 811) = 2230.4 lb/ac
    assert pass_schedule(2, 2500.0, SpreaderSettings(unit="t/ha"), unit="lb/ac") \
        == "2 passes of 2,230 lb/ac"


def test_bad_spreader_settings_name_the_key() -> None:
    with pytest.raises(SettingsError) as err:
        SpreaderSettings(min_rate=3000, max_per_pass=2500)
    assert err.value.key == "min_rate"
    with pytest.raises(SettingsError) as err:
        SpreaderSettings(max_per_pass=2500, rate_step=3000)
    assert err.value.key == "rate_step"
    with pytest.raises(SettingsError) as err:
        from_mapping(SpreaderSettings, {"unit": "kg/ac"}, section="spreader")
    assert err.value.key == "spreader.unit"
    with pytest.raises(SettingsError) as err:
        from_mapping(SpreaderSettings, {"min_rate": -1}, section="spreader")
    assert err.value.key == "spreader.min_rate"


def test_a_product_s_own_per_pass_limit_and_the_spreader_s_the_smaller_applies() -> None:
    sp = SpreaderSettings(unit="t/ha", max_per_pass=4.0,
                          max_per_pass_by_product={"gypsum": 5.0, "lime": 2.5})
    assert sp.for_product("gypsum").max_per_pass == 4.0
    assert sp.for_product("lime").max_per_pass == 2.5
    assert sp.for_product("dolomite").max_per_pass == 4.0
    assert SpreaderSettings(max_per_pass_by_product={"lime": 0.0}).for_product("lime") \
        .max_per_pass == 0.0  # 0: none
    # the product's limit splits as the spreader's would (ceil(9.8 / 5) = 2 passes of 4.9)
    n, per = split_passes(9800.0, sp.for_product("gypsum").max_per_pass_kg_ha)
    assert int(n) == 3 and float(per) == pytest.approx(9800 / 3)  # 4 t/ha is the smaller
    with pytest.raises(SettingsError) as err:
        SpreaderSettings(min_rate=3000, max_per_pass_by_product={"gypsum": 2500})
    assert err.value.key == "max_per_pass_by_product.gypsum"
    with pytest.raises(SettingsError) as err:
        from_mapping(SpreaderSettings, {"max_per_pass_by_product": {"lime": -1.0}},
                     section="spreader")
    assert "max_per_pass_by_product.lime" in str(err.value)


def test_an_unsplit_pass_above_the_common_limit_is_named_and_left_as_it_is() -> None:
    """5 t/ha in one pass: common practice (geosoil.spreader.COMMON_MAX_PER_PASS_KG_HA)."""
    rates, zones = [9_800.0, COMMON_MAX_PER_PASS_KG_HA, 1_200.0, float("nan")], [1, 2, 3, 4]
    msg = unsplit_pass_warning(rates, zones, spreader=SpreaderSettings(), paddock="Red Hill",
                               product="gypsum")
    assert msg is not None
    assert msg.startswith("paddock 'Red Hill', gypsum: zone(s) 1 get up to 9,800 kg/ha")
    assert "common practice" in msg and "max_per_pass_by_product.gypsum" in msg
    for limited in (SpreaderSettings(max_per_pass=6000),
                    SpreaderSettings(max_per_pass_by_product={"gypsum": 6000})):
        assert unsplit_pass_warning(rates, zones, spreader=limited, paddock="Red Hill",
                                    product="gypsum") is None
    assert unsplit_pass_warning([4_000.0], [1], spreader=SpreaderSettings(), paddock="P",
                                product="lime") is None
