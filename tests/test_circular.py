import numpy as np

from pipeline.circular import true_runs


def test_true_runs_including_wrap():
    f = np.array([1, 1, 0, 0, 1, 0, 1, 1], bool)
    runs = sorted(true_runs(f))
    assert runs == [(4, 5), (6, 10)]  # the last run wraps through index 0 and 1
    assert true_runs(np.zeros(5, bool)) == []
    assert true_runs(np.ones(5, bool)) == [(0, 5)]
