"""The comparisons with the best row keep the family-wise error at alpha (Holm, "A Simple
Sequentially Rejective Multiple Test Procedure", Scandinavian Journal of Statistics 6, 1979):
simulated with the report's own rule on rows of truly equal quality, and a true gap is never
called equivalent. The draws are log-normal, as seed-to-seed error metrics often are (common
practice); a fixed generator seed keeps the test exact."""

import numpy as np

from loopzoo.report.ranking import compare_family, competition_ranks
from loopzoo.report.results import Comparison, Row
from loopzoo.report.stats import interval

REPS = 600


def _row(label, values, exact=False):
    return Row(kind="model", label=label, runs=(), counts={}, values=tuple(values),
               interval=interval(values, "log", exact=exact), exact=exact, flags=(), tuning=None,
               ship=None,
               params="", params_value=None, rank=None, versus_best=Comparison("no data", None),
               versus_pick=Comparison("no data", None), cost={}, batch_size=None, reach={},
               exposure=None, front_latency=None, front_params=None)


def _verdicts(rng, centres, seeds=3):
    rows = [_row(f"r{i}", np.exp(c + rng.normal(0.0, 1.0, seeds))) for i, c in enumerate(centres)]
    best_key = next(iter(competition_ranks(rows, "min")))
    best = next(r for r in rows if r.key == best_key)
    found = compare_family(rows, best, "log", 0.05, 0.05, 0.95)
    return {key[1]: comparison.verdict for key, comparison in found.items()}


def test_equal_rows_are_rarely_called_worse():
    # Eight rows of equal quality, three seeds each: without a correction, comparing seven rows
    # with the best at 0.05 calls at least one "worse" far more often than 5% of the time.
    rng = np.random.default_rng(20261202)
    runs = [_verdicts(rng, [0.0] * 8) for _ in range(REPS)]
    family_error = np.mean([any(v == "worse" for v in run.values()) for run in runs])
    # 600 replicates: a binomial standard error of about 0.009 at 0.05.
    assert family_error <= 0.07
    assert not any(v == "equivalent" for run in runs for v in run.values())


def test_a_true_gap_is_never_called_equivalent():
    rng = np.random.default_rng(7)
    runs = [_verdicts(rng, [0.0, 2.0]) for _ in range(REPS // 2)]
    assert not any(run.get("r1") == "equivalent" for run in runs)
    assert any(run.get("r1") == "worse" for run in runs)


def test_two_seed_independent_rows_are_not_tested_against_each_other():
    # Two classical rows whose values do not depend on the seed: no sampling, so a p-value would
    # claim evidence nothing measured; a seed-dependent row is still tested (one-sample t-test).
    best, other = _row("ar", [0.17893] * 3, exact=True), _row("ridge", [0.17894] * 3, exact=True)
    topology = _row("gru", [0.18, 0.19, 0.2])
    found = compare_family([best, other, topology], best, "log", 0.05, 0.05, 0.95)
    assert found[other.key].verdict == "exact" and found[other.key].p_value is None
    assert found[topology.key].p_value is not None
