"""Minimum harvest age rules, alone and combined (the largest age wins)."""

import numpy as np
import pytest

from yieldscape.growth import ChapmanRichards, SiteScaling, chapman_richards_culmination_age
from yieldscape.growth.economics import faustmann_rotation
from yieldscape.growth.rules import AgeRules, Money, min_harvest_ages, summarise_site

CURVE = ChapmanRichards(500.0, 0.03, 3.0, SiteScaling(20.0, 1.0, 0.5))
MONEY = Money(price_per_m3=25.0, regen_cost_per_ha=400.0, discount_rate=0.03)


def site(rules: AgeRules, si: float = 20.0):
    """The summary at one site, with plain values as the growth layer takes them."""
    return summarise_site("pine", CURVE, si, rules, MONEY)


def test_mai_share_rule():
    # 95% of maximum MAI (common practice): MAI(t) = 0.95 MAI(t*) before t*.
    s = site(AgeRules(mai_share=0.95))
    t_star = chapman_richards_culmination_age(0.03, 3.0)
    assert s.culmination.age_years == pytest.approx(t_star, rel=1e-7)
    age = s.rule_ages["mai_share"]
    v = float(CURVE.volume_m3_ha(age, 20.0))
    assert age < t_star and v / age == pytest.approx(0.95 * s.culmination.mai, rel=1e-7)


def test_volume_rule_and_never_reached():
    s = site(AgeRules(volume_m3_ha=150.0))
    assert float(CURVE.volume_m3_ha(s.rule_ages["volume"], 20.0)) == pytest.approx(150.0)
    never = site(AgeRules(volume_m3_ha=900.0))
    assert never.min_harvest_age_years == np.inf


def test_combined_rules_take_the_largest_age():
    s = site(AgeRules(fixed_years=40.0, mai_share=0.95, economic=True))
    assert set(s.rule_ages) == {"fixed", "mai_share", "economic"}
    assert s.min_harvest_age_years == max(s.rule_ages.values())
    faus = faustmann_rotation(lambda t: CURVE.volume_m3_ha(t, 20.0 + 0 * t), 25.0, 400.0, 0.03)
    assert s.rule_ages["economic"] == pytest.approx(faus.age_years)


def test_per_stand_ages_follow_site():
    # rho_k = (SI/20)^0.5: the MAI-share age scales by 1/rho_k (site scheme, docs/methods.md)
    sites = np.array([16.0, 20.0, 25.0, 20.0, 16.0])
    ages = min_harvest_ages(CURVE, sites, AgeRules(mai_share=0.9), MONEY)
    assert ages[1] == ages[3] and ages[0] == ages[4]
    np.testing.assert_allclose(ages[[0, 2]], ages[1] / np.sqrt(sites[[0, 2]] / 20.0), rtol=1e-6)
