"""Teacher-forcing schedules of scheduled sampling.

Formulas: Bengio, Vinyals, Jaitly & Shazeer, "Scheduled Sampling for Sequence Prediction with
Recurrent Neural Networks", NIPS 2015, section 2.4 (from memory):
linear e_i = max(e_min, k - c i), exponential e_i = k^i, inverse sigmoid e_i = k / (k + exp(i/k)).
"""

import math

import pytest

from loopzoo.engine.schedules import TeacherForcingPlan, exponential, inverse_sigmoid, linear


def test_linear_decays_by_c_per_step_and_floors_at_e_min():
    assert linear(0, k=1.0, c=0.01, e_min=0.1) == 1.0
    assert linear(30, k=1.0, c=0.01, e_min=0.1) == pytest.approx(0.7)
    assert linear(1000, k=1.0, c=0.01, e_min=0.1) == 0.1


def test_exponential_is_k_to_the_step():
    assert exponential(0, k=0.99) == 1.0
    assert exponential(100, k=0.99) == pytest.approx(0.99**100)


def test_inverse_sigmoid_matches_its_formula_and_underflows_to_zero():
    k = 50.0
    for step in (0, 10, 100, 500):
        assert inverse_sigmoid(step, k=k) == pytest.approx(k / (k + math.exp(step / k)))
    # exp(i / k) would overflow a float here; the probability is 0.0 to machine precision.
    assert inverse_sigmoid(10**6, k=1.0) == 0.0


@pytest.mark.parametrize(
    "options",
    [
        {"mode": "scheduled", "schedule": "linear"},
        {"mode": "scheduled", "schedule": "exponential", "k": 0.995},
        {"mode": "scheduled", "schedule": "inverse_sigmoid", "k": 20.0},
    ],
)
def test_every_schedule_starts_near_one_and_never_increases(options):
    plan = TeacherForcingPlan.from_options(options, total_steps=400)
    values = [plan.probability(i) for i in range(0, 401, 10)]
    assert values[0] > 0.9
    assert all(b <= a for a, b in zip(values, values[1:], strict=False))
    assert all(0.0 <= v <= 1.0 for v in values)
    assert values[-1] < 0.5


def test_linear_default_slope_reaches_e_min_at_the_step_budget():
    plan = TeacherForcingPlan.from_options(
        {"mode": "scheduled", "schedule": "linear", "e_min": 0.2}, total_steps=100
    )
    assert plan.probability(50) == pytest.approx(0.6)
    assert plan.probability(100) == pytest.approx(0.2)


def test_fixed_modes_and_the_default():
    assert TeacherForcingPlan.from_options(None, total_steps=10).probability(5) == 1.0
    forced = TeacherForcingPlan.from_options({"mode": "teacher_forcing"}, total_steps=10)
    free = TeacherForcingPlan.from_options({"mode": "free_running"}, total_steps=10)
    assert forced.probability(7) == 1.0 and free.probability(0) == 0.0


@pytest.mark.parametrize(
    ("options", "message"),
    [
        ({"mode": "sometimes"}, "model.feedback.mode"),
        ({"mode": "scheduled", "schedule": "cosine"}, "model.feedback.schedule"),
        ({"mode": "scheduled", "schedule": "exponential", "k": 1.5}, "0 < k < 1"),
        ({"mode": "scheduled", "schedule": "exponential"}, "model.feedback.k"),
        ({"mode": "scheduled", "schedule": "inverse_sigmoid", "k": 0.5}, "k >= 1"),
        ({"mode": "scheduled", "schedule": "inverse_sigmoid", "k": 5, "c": 1}, "not used"),
        ({"mode": "scheduled", "schedule": "linear", "c": -1.0}, "c > 0"),
        ({"mode": "free_running", "k": 3.0}, "only to mode 'scheduled'"),
    ],
)
def test_bad_options_name_the_field_and_what_is_accepted(options, message):
    with pytest.raises(ValueError, match=message):
        TeacherForcingPlan.from_options(options, total_steps=100)
