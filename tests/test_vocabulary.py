"""One vocabulary (closure_nn.physics.vocabulary, closure_nn.data.configurations): the separated
configuration of a row is distinct from its flow pattern, and the rule for rows without a pattern
is an object of its own. Checks of the code's own naming; no outside source applies, except the
pattern-to-geometry pairing, which is the trade's (common practice: stratified smooth and wavy flow
are solved as a layer, annular flow as a film; Taitel & Dukler 1976, Barnea 1987)."""
from __future__ import annotations

import pandas as pd
import pytest

from closure_nn.data.configurations import (CONFIGURATION_CODE, SEPARATED_CONFIGURATIONS, UNKNOWN_PATTERN_RULES,
                                            RowConfiguration, UnknownPatternRule, configuration_codes)
from closure_nn.physics import geometry
from closure_nn.physics.vocabulary import (ANNULAR, CONFIGURATION_OF_PATTERN, CONFIGURATIONS, INTERMITTENT,
                                           PATTERNS, STRATIFIED_SMOOTH, STRATIFIED_WAVY)


def test_configurations_are_the_geometry_names():
    assert CONFIGURATIONS == SEPARATED_CONFIGURATIONS == (geometry.STRATIFIED, geometry.ANNULAR)
    assert set(CONFIGURATION_OF_PATTERN) <= set(PATTERNS)
    assert CONFIGURATION_OF_PATTERN == {STRATIFIED_SMOOTH: geometry.STRATIFIED, STRATIFIED_WAVY: geometry.STRATIFIED,
                                        ANNULAR: geometry.ANNULAR}


def test_every_unknown_pattern_rule_has_a_code():
    assert UNKNOWN_PATTERN_RULES == ("skip", "stratified", "predicted", "predicted_clear")
    codes = [UnknownPatternRule.parse(r).code for r in UNKNOWN_PATTERN_RULES]
    assert codes == [RowConfiguration.NONE, RowConfiguration.STRATIFIED, RowConfiguration.PREDICTED,
                     RowConfiguration.PREDICTED_CLEAR]
    with pytest.raises(ValueError, match="skip, stratified, predicted, predicted_clear"):
        UnknownPatternRule.parse("guess")


@pytest.mark.parametrize("rule", UNKNOWN_PATTERN_RULES)
def test_labelled_rows_ignore_the_rule(rule):
    labels = pd.Series([STRATIFIED_WAVY, ANNULAR, INTERMITTENT, None])
    got = configuration_codes(labels, 4, rule).tolist()
    assert got[:3] == [CONFIGURATION_CODE[geometry.STRATIFIED], CONFIGURATION_CODE[geometry.ANNULAR], RowConfiguration.NONE]
    assert got[3] == UnknownPatternRule(rule).code
