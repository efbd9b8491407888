"""Rule sets as data: every field present, values as published, custom taken from programme.yaml."""
from __future__ import annotations

import dataclasses

import pytest
import yaml

from generator.config import RULE_SETS, Config, CustomRules
from generator.exposure import action_value, band_names, band_of, peak_flag
from generator.rules import _HERE, RULE_IDS, RuleSet, load_rule_set, rule_sets_for


@pytest.mark.parametrize("rule_id", RULE_IDS)
def test_every_field_is_written_in_the_yaml(rule_id: str) -> None:
    # the dataclass is the schema: each yaml names every field (no silent defaults), nothing more
    with open(_HERE / f"{rule_id}.yaml", encoding="utf-8") as fh:
        data = yaml.safe_load(fh)
    names = {f.name for f in dataclasses.fields(RuleSet)}
    assert set(data) == names
    rs = load_rule_set(rule_id)
    assert rs.id == rule_id
    assert rs.caution == rule_id
    assert rs.metric in ("twa", "lex")
    assert rs.clauses, "clauses cited"
    assert rule_id in RULE_SETS


def test_osha_values() -> None:
    r = load_rule_set("osha-1910.95")
    # 29 CFR 1910.95(b)(1) Table G-16: 90 dBA for 8 h
    assert (r.criterion_level, r.criterion_hours) == (90.0, 8.0)
    # 29 CFR 1910.95 App. A / Table G-16a: 5-dB exchange rate
    assert r.exchange_rate == 5.0
    # 29 CFR 1910.95(d)(2)(i): 80 to 130 dB integrated
    assert (r.threshold, r.upper_limit) == (80.0, 130.0)
    # 29 CFR 1910.95(c)(1): action level 85 dB TWA; (b)(1): PEL 90 dB TWA
    assert (r.lower_action_value, r.upper_action_value, r.limit_value) == (None, 85.0, 90.0)
    # OSHA Technical Manual (common practice of enforcement): only levels >= 90 dBA count for the PEL dose
    assert r.limit_dose_threshold == 90.0
    # footnote to Table G-16: 140 dB peak
    assert r.peak_limit == 140.0
    assert r.metric == "twa"
    assert r.protectors_count_for_limit is False
    # 29 CFR 1910.95(g)(5)(i) baseline within 6 months; (g)(6) annual audiogram; (k)(2) annual training
    assert (r.baseline_months, r.audiogram_interval_months, r.training_interval_months) == (6.0, 12.0, 12.0)
    # 29 CFR 1910.95(j)(2) and (j)(3): attenuate to 90, or 85 after a standard threshold shift
    assert (r.protected_target, r.protected_target_after_sts) == (90.0, 85.0)
    assert r.clauses["upper_action_value"] == "29 CFR 1910.95(c)(1)"


def test_niosh_values() -> None:
    r = load_rule_set("niosh-rel")
    # NIOSH 98-126: REL 85 dBA 8-h TWA, 3-dB exchange rate, ceiling 140 dBA
    assert (r.criterion_level, r.criterion_hours, r.exchange_rate) == (85.0, 8.0, 3.0)
    assert r.limit_value == 85.0
    assert r.peak_limit == 140.0
    assert r.metric == "twa"
    # dosimeter threshold 80 dBA (common practice)
    assert r.threshold == 80.0


def test_eu_values() -> None:
    r = load_rule_set("eu-2003-10")
    # Directive 2003/10/EC Art. 3(1): 80 / 85 / 87 dB(A) LEX,8h and 135 / 137 / 140 dB(C) peak
    assert (r.lower_action_value, r.upper_action_value, r.limit_value) == (80.0, 85.0, 87.0)
    assert (r.peak_lower_action, r.peak_upper_action, r.peak_limit) == (135.0, 137.0, 140.0)
    # Art. 3(2): protectors count for the limit values only
    assert r.protectors_count_for_limit is True
    assert r.metric == "lex"
    assert r.exchange_rate == 3.0
    # our documented choice: EU bands are judged on LEX,8h + U (ISO 9612 Annex C)
    assert r.judge_with_uncertainty is True


def test_custom_comes_from_programme_yaml() -> None:
    cfg = Config(rules="custom", custom_rules=CustomRules(name="Site rule", criterion_level=88.0, exchange_rate=4.0,
                                                          threshold=75.0, lower_action_value=78.0,
                                                          upper_action_value=83.0, limit_value=86.0,
                                                          peak_limit=135.0, judge_with_uncertainty=False))
    r = load_rule_set("custom", cfg)
    assert (r.name, r.criterion_level, r.exchange_rate, r.threshold) == ("Site rule", 88.0, 4.0, 75.0)
    assert (r.lower_action_value, r.upper_action_value, r.limit_value, r.peak_limit) == (78.0, 83.0, 86.0, 135.0)
    assert r.judge_with_uncertainty is False
    rs = rule_sets_for(Config(rules="eu-2003-10", compare_rules=["osha-1910.95", "eu-2003-10"]))
    assert list(rs) == ["eu-2003-10", "osha-1910.95"]


def test_bands_follow_the_action_and_limit_values() -> None:
    eu = load_rule_set("eu-2003-10")
    osha = load_rule_set("osha-1910.95")
    niosh = load_rule_set("niosh-rel")
    assert band_names(eu) == eu.band_labels() == ["below 80", "80–85", "85–87", "at or above 87"]
    # Directive 2003/10/EC Art. 3: a value equal to an action value is "at or above" it
    assert list(band_of([79.99, 80.0, 84.9, 85.0, 86.99, 87.0, float("nan")], eu)) == \
        ["below 80", "80–85", "80–85", "85–87", "85–87", "at or above 87", ""]
    # 29 CFR 1910.95(c)(1)/(b)(1): 85 action level, 90 PEL
    assert list(band_of([84.9, 85, 89.9, 90], osha)) == ["below 85", "85–90", "85–90", "at or above 90"]
    assert list(band_of([84.9, 85], niosh)) == ["below 85", "at or above 85"]
    # the audiometry duty: 1910.95(c)(1) 85 dB TWA; NIOSH REL 85 dBA; Directive 2003/10/EC Art. 10(2):
    # preventive audiometric testing available above the lower action value, 80 dB(A)
    assert action_value(osha) == 85.0 and action_value(eu) == 80.0 and action_value(niosh) == 85.0


def test_peak_flags() -> None:
    eu = load_rule_set("eu-2003-10")
    # Directive 2003/10/EC Art. 3(1)(a)-(c): 135 / 137 / 140 dB(C)
    assert list(peak_flag([134.9, 135, 137, 140, float("nan")], eu)) == \
        ["", "lower action", "upper action", "limit", ""]
    # 29 CFR 1910.95 Table G-16 footnote: 140 dB
    assert list(peak_flag([139.9, 140.0], load_rule_set("osha-1910.95"))) == ["", "limit"]


def test_unknown_rule_set() -> None:
    with pytest.raises(KeyError):
        load_rule_set("nope")


@pytest.mark.parametrize("rule_id", RULE_IDS)
def test_rule_files_are_read_as_the_safe_loader_reads_them(rule_id: str) -> None:
    # the rule files are parsed once per process with PyYAML's safe loader;
    # the oracle is yaml.safe_load, and each call gets its own copy (a change to one is not seen by the next)
    from generator.rules import _read

    with open(_HERE / f"{rule_id}.yaml", encoding="utf-8") as fh:
        expected = yaml.safe_load(fh)
    first = _read(rule_id)
    assert first == expected
    first["clauses"] = {"changed": "by a caller"}
    assert _read(rule_id) == expected
