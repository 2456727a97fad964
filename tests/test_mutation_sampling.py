"""The mutation report's estimate from a random sample of mutants (tools/mutation_report.py).

Reference: simple random sampling without replacement from a finite population — the sample proportion is
unbiased and its standard error is sqrt(p (1 - p) / n * (N - n) / (N - 1)) (Cochran, Sampling Techniques,
3rd ed., ch. 3; from memory). Checked by drawing many samples from an invented population of known kill rate.
"""

import importlib.util
from collections import Counter
from pathlib import Path

import numpy as np

_spec = importlib.util.spec_from_file_location(
    "mutation_report", Path(__file__).resolve().parent.parent / "tools" / "mutation_report.py"
)
report = importlib.util.module_from_spec(_spec)
_spec.loader.exec_module(report)


def test_the_sampled_score_is_unbiased_and_its_standard_error_matches_the_spread_of_repeated_samples():
    rng = np.random.default_rng(5)
    tested = Counter(killed=2000, survived=300, equivalent=20)  # tested before the sample, exactly known
    population = np.array(["killed"] * 2600 + ["survived"] * 500 + ["equivalent"] * 100)  # N = 3200
    n = 400
    truth = (2000 + 2600) / (2300 + 3100)
    scores, ses = [], []
    for _ in range(2000):
        sample = Counter(rng.choice(population, size=n, replace=False).tolist())
        both = tested + Counter({k: v for k, v in sample.items() if k != "equivalent"})
        score, se = report.sampled_estimate(both, sample, len(population) - n)
        scores.append(score)
        ses.append(se)
    scores = np.array(scores)
    # the ratio estimator is unbiased to first order: its mean within 4 standard errors of the mean of 2000
    assert abs(scores.mean() - truth) < 4 * scores.std() / np.sqrt(scores.size)
    # the reported standard error is the spread of the estimates (within 10 %: the delta method neglects the
    # spread of the equivalent fraction, about 3 % of the population here)
    assert abs(np.mean(ses) / scores.std() - 1) < 0.10


def test_without_a_sample_the_score_is_the_exact_fraction_killed():
    score, se = report.sampled_estimate(Counter(killed=90, survived=10, equivalent=5), Counter(), 0)
    assert score == 0.9 and se == 0.0
