"""Risk scoring against published facts and arithmetic anyone can redo."""

import itertools

from abate.domain.scoring import (
    REASON_RPN,
    REASON_SEVERITY,
    Ratings,
    RiskPolicy,
    assess,
    default_action_threshold,
    default_severity_threshold,
)

POLICY_1_10 = RiskPolicy(action_threshold=100, severity_threshold=9)
POLICY_1_5 = RiskPolicy(action_threshold=20, severity_threshold=5)


def _all_rpns(top):
    return [Ratings(s, o, d).rpn for s, o, d in itertools.product(range(1, top + 1), repeat=3)]


def test_rpn_is_severity_times_occurrence_times_detection():
    # IEC 60812:2018 defines RPN = S x O x D.
    assert Ratings(7, 8, 5).rpn == 280


def test_rpn_on_1_to_10_scales_spans_1_to_1000_with_120_distinct_values():
    # Range 1..1000: IEC 60812:2018. 120 distinct values: D. J. Wheeler, "Avoiding more
    # numerical jabberwocky", Quality Digest, 2011 (also redone here by enumeration).
    values = _all_rpns(10)
    assert min(values) == 1 and max(values) == 1000
    assert len(set(values)) == 120


def test_the_first_integers_that_are_never_an_rpn():
    # Wheeler, Quality Digest, 2011: 880 integers in 1..1000 are never an RPN, first 11, 13, 17, 19, 22.
    never = sorted(set(range(1, 1001)) - set(_all_rpns(10)))
    assert len(never) == 880
    assert never[:5] == [11, 13, 17, 19, 22]


def test_rpn_mean_median_and_multiplicities_over_all_triples():
    # Arithmetic anyone can redo (shared REFERENCE.md, [C]): mean 166.375, median 105,
    # 60, 72 and 120 each reached by 24 triples, 125 only by (5, 5, 5).
    values = sorted(_all_rpns(10))
    assert sum(values) / len(values) == 166.375
    assert (values[499] + values[500]) / 2 == 105
    for rpn in (60, 72, 120):
        assert values.count(rpn) == 24
    assert values.count(125) == 1


def test_rpn_on_1_to_5_scales_spans_1_to_125_with_30_distinct_values():
    # Arithmetic by enumeration (shared REFERENCE.md, [C]).
    values = _all_rpns(5)
    assert (min(values), max(values), len(set(values))) == (1, 125, 30)


def test_equal_rpn_of_100_hides_different_severities():
    # (10,2,5), (1,10,10) and (4,5,5) all give 100: Lovely Professional University,
    # DMGT524 Total Quality Management, unit 12. Only the severity rule tells them apart.
    triples = [Ratings(10, 2, 5), Ratings(1, 10, 10), Ratings(4, 5, 5)]
    assert {ratings.rpn for ratings in triples} == {100}
    reasons = [assess(ratings, POLICY_1_10).reasons for ratings in triples]
    assert reasons == [(REASON_RPN, REASON_SEVERITY), (REASON_RPN,), (REASON_RPN,)]


def test_severity_rule_flags_a_severe_mode_with_a_low_rpn():
    # (9,2,2) = 36 ranks below (5,5,5) = 125 by RPN though far more severe (arithmetic; criticism
    # of RPN ranking: J. B. Bowles, Proc. RAMS 2003, DOI 10.1109/RAMS.2003.1182019). A severity
    # of 9-10 calls for action whatever the RPN (common practice, no source).
    severe = assess(Ratings(9, 2, 2), POLICY_1_10)
    assert Ratings(9, 2, 2).rpn == 36 < Ratings(5, 5, 5).rpn
    assert severe.needs_action and severe.reasons == (REASON_SEVERITY,)
    assert severe.priority == "high"


def test_priority_bands_split_at_the_threshold_and_its_half():
    assert assess(Ratings(5, 5, 4), POLICY_1_10).priority == "high"  # 100: at the threshold
    assert assess(Ratings(5, 5, 2), POLICY_1_10).priority == "medium"  # 50: half of it
    assert assess(Ratings(7, 7, 1), POLICY_1_10).priority == "low"  # 49
    assert not assess(Ratings(7, 7, 1), POLICY_1_10).needs_action


def test_compact_scale_cut_off_near_20():
    # A common action cut-off on 1-5 scales is about 20 of 125 (common practice, no source).
    assert assess(Ratings(3, 3, 3), POLICY_1_5).needs_action  # 27
    assert not assess(Ratings(2, 3, 3), POLICY_1_5).needs_action  # 18
    assert assess(Ratings(5, 1, 1), POLICY_1_5).reasons == (REASON_SEVERITY,)


def test_criticality_index_is_severity_times_occurrence():
    # S x O ranks by consequence and likelihood alone (common practice, no source).
    assert Ratings(9, 2, 2).criticality == 18


def test_defaults_for_custom_scale_sets():
    # The top fifth of severity and a tenth of the largest RPN (our documented defaults).
    assert default_severity_threshold(10) == 9
    assert default_severity_threshold(5) == 5
    assert [default_severity_threshold(top) for top in (4, 3, 2)] == [4, 3, 2]  # never above the scale
    assert default_action_threshold(1000) == 100
    assert default_action_threshold(6 * 6 * 6) == 22
    assert default_action_threshold(2 * 2 * 2) == 1
