"""Helpers on a closed ring: runs, ranges, gaps, periodic interpolation, sector slices."""
import numpy as np
import pytest

from chimeline.core.circular import (angle_diff_deg, fill_circular, gap_arcs, interp_periodic, near_sample, run_ranges,
                                     sector_slices, true_runs)
from chimeline.core.robust import MAD_TO_SIGMA, Z95, mad_sigma
from chimeline.core.rng import Purpose, stream


def test_true_runs_wrap_around():
    assert true_runs([1, 1, 0, 0, 1]) == [(4, 7)]
    assert true_runs([0, 1, 1, 0]) == [(1, 3)]
    assert true_runs([1, 1, 1]) == [(0, 3)]
    assert true_runs([0, 0]) == []


def test_run_ranges_and_gap_arcs():
    az = np.arange(0.5, 360, 1.0)
    flag = (az > 350) | (az < 10)
    assert run_ranges(az, flag) == ((350.5, 9.5),)
    assert run_ranges(az, np.ones(360, bool)) == ((0.0, 360.0),)
    assert gap_arcs(flag, 1.0) == [(350.0, 10.0)]


def test_periodic_interpolation_wraps():
    xp = np.array([10.0, 350.0])
    fp = np.array([1.0, 3.0])
    # halfway between 350 and 370 (= 10) is 0 / 360: the mean of the two values
    assert interp_periodic([0.0, 360.0 - 1e-12], xp, fp) == pytest.approx([2.0, 2.0])
    assert angle_diff_deg(359.0, 1.0) == pytest.approx(-2.0)
    assert fill_circular(np.array([1.0, np.nan, 3.0, np.nan]))[[1, 3]] == pytest.approx([2.0, 2.0])


def test_near_sample_and_sectors():
    assert list(near_sample(np.array([0.2, 5.0, 359.9]), np.array([0.5, 359.5]), 0.5)) == [True, False, True]
    slices, w = sector_slices(np.array([1.0, 6.0, 359.0, 2.0]), 5.0)
    assert w == 5.0 and len(slices) == 72 and sorted(slices[0]) == [0, 3] and list(slices[71]) == [2]


def test_robust_constants_against_scipy():
    from scipy import stats

    assert MAD_TO_SIGMA == pytest.approx(1 / stats.norm.ppf(0.75), abs=1e-5)
    assert Z95 == pytest.approx(stats.norm.ppf(0.975), rel=1e-15)
    x = np.random.default_rng(0).normal(0, 2.0, 200_000)
    assert mad_sigma(x) == pytest.approx(2.0, rel=0.01)


def test_streams_are_reproducible_and_distinct():
    a = stream(5, Purpose.FACE_THINNING).random(3)
    assert np.array_equal(a, stream(5, Purpose.FACE_THINNING).random(3))
    assert not np.array_equal(a, stream(5, Purpose.PLOT_SAMPLE).random(3))
    assert not np.array_equal(a, stream(6, Purpose.FACE_THINNING).random(3))
    # the codes are part of the reproducibility contract (the simulator's streams never change)
    assert np.array_equal(stream(7, Purpose.SYNTH_STATION, offset=2).random(2),
                          np.random.default_rng([7, 1002]).random(2))
