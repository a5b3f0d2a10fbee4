"""Expected best validation score after n trials (Dodge, Gururangan, Card, Schwartz & Smith,
"Show Your Work: Improved Reporting of Experimental Results", EMNLP 2019, section 3): checked
against the definition it rests on, the mean of the best of n draws with replacement from the
observed trial scores, computed here by enumerating every draw (exact, not simulated)."""

import itertools
import math

import pytest

from loopzoo.report.budget import budgets, expected_best

# Hand-made validation scores of six trials (invented), with a repeated value.
TRIALS = [0.31, 0.12, 0.55, 0.12, 0.08, 0.4]


@pytest.mark.parametrize("goal", ["min", "max"])
@pytest.mark.parametrize("budget", [1, 2, 3, 4])
def test_expected_best_is_the_mean_best_of_n_draws_with_replacement(goal, budget):
    pick = min if goal == "min" else max
    draws = list(itertools.product(TRIALS, repeat=budget))
    exact = math.fsum(pick(draw) for draw in draws) / len(draws)
    assert expected_best(TRIALS, goal, budget) == pytest.approx(exact, rel=1e-12)


def test_one_trial_is_the_mean_and_many_approach_the_best():
    assert expected_best(TRIALS, "min", 1) == pytest.approx(sum(TRIALS) / len(TRIALS))
    assert expected_best(TRIALS, "min", 400) == pytest.approx(min(TRIALS), abs=1e-12)
    assert expected_best(TRIALS, "max", 400) == pytest.approx(max(TRIALS), abs=1e-12)


def test_hand_worked_two_trials():
    # Two scores 1 and 3, best of 2 draws (maximise): 3 unless both draws are 1 (prob 1/4).
    assert expected_best([1.0, 3.0], "max", 2) == pytest.approx(0.25 * 1 + 0.75 * 3)


def test_budgets_shown():
    assert budgets(12) == [1, 2, 4, 8, 12] and budgets(1) == [1] and budgets(8) == [1, 2, 4, 8]


@pytest.mark.parametrize(("values", "goal", "budget", "field"), [
    ([], "min", 1, "trial scores"), ([0.1, math.nan], "min", 1, "trial scores"),
    ([0.1], "best", 1, "goal"), ([0.1], "min", 0, "budget"),
])
def test_bad_input_is_refused(values, goal, budget, field):
    with pytest.raises(ValueError, match=field):
        expected_best(values, goal, budget)
