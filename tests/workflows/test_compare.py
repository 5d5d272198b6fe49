"""QA compare: the noise ratio between two setups is the injected one; one setup does not differ from itself."""
import json

import pytest

from tests.helpers import invoke


def _stations(noise):
    return {"ring_count": 4, "ring_distance": 7.0, "common": {
        "h_step_deg": 0.5, "v_step_deg": 0.5, "v_min_deg": -35, "range_noise": noise, "angular_noise_deg": noise,
        "band": {"h_step_deg": 0.12, "v_step_deg": 0.05}}}


def test_compare_reports_the_noise_ratio(simulate, tmp_path):
    """Two setups of one tank, range and angular noise doubled: the vertical noise ratio is the injected one.
    (Kept moderate: when the range noise at grazing incidence nears the plate width, the radial window
    truncates the noise and the estimate runs low; see DEVELOPERS.md.)"""
    low, t1 = simulate("small_tank.yaml", 86, stations=_stations(0.001))
    hi, t2 = simulate("small_tank.yaml", 86, stations=_stations(0.002))
    for scan, name, setup in ((low, "a", "scanner A"), (hi, "b", "scanner B")):
        invoke(["-q", "run", str(scan), "--out", str(tmp_path / name), "--set", f"input.setup={setup}"])
    r = invoke(["-q", "compare", str(tmp_path / "a"), str(tmp_path / "b"), "--out", str(tmp_path / "c")])
    js = json.loads((tmp_path / "c" / "compare.json").read_text())
    n = js["pairs"][0]["noise"]
    true_ratio = t2["noise"]["vertical_noise"] / t1["noise"]["vertical_noise"]
    assert n["ratio_ci95"][0] <= true_ratio <= n["ratio_ci95"][1]
    assert n["noise_differs"] and n["p_value"] < 1e-6
    assert n["brown_forsythe"]["p_value"] < 1e-6  # scipy.stats.levene(center='median')
    assert js["pairs"][0]["same_tank"]
    assert (tmp_path / "c" / "compare.html").exists() and (tmp_path / "c" / "compare.csv").exists()
    # the answer in words, with the setup names from the runs' configs
    words = n["in_words"]
    assert words.startswith(f"scanner B is {100 * (n['sigma_ratio'] - 1):.0f} % noisier than scanner A (ratio ")
    extra = (js["runs"][1]["sigma"] ** 2 - js["runs"][0]["sigma"] ** 2) ** 0.5 * 1e3
    assert f"the added noise in quadrature is {extra:.2f} mm" in words and words in r.output
    assert "qualified tank engineer" in js["caution"]
    html = (tmp_path / "c" / "compare.html").read_text()
    assert words in html and "qualified tank engineer or authorized inspector" in html


def test_compare_same_setup_does_not_differ(simulate, tmp_path):
    a, _ = simulate("small_tank.yaml", 87)
    b, _ = simulate("small_tank.yaml", 88)
    for scan, name in ((a, "a"), (b, "b")):
        invoke(["-q", "run", str(scan), "--out", str(tmp_path / name), "--set", "input.setup=scanner A"])
    invoke(["-q", "compare", str(tmp_path / "a"), str(tmp_path / "b"), "--out", str(tmp_path / "c")])
    js = json.loads((tmp_path / "c" / "compare.json").read_text())
    n = js["pairs"][0]["noise"]
    assert n["ratio_ci95"][0] <= 1.0 <= n["ratio_ci95"][1]
    # one setup name for both runs: the words tell them apart by their folders
    assert "scanner A (a)" in n["in_words"] and "scanner A (b)" in n["in_words"], n["in_words"]


def test_equivalence_and_variance_ratio_against_scipy():
    """The variance-ratio F test and the two one-sided equivalence tests, checked with scipy.stats directly."""
    from scipy import stats

    from chimeline.evaluate.comparison import equivalence, variance_ratio

    vr = variance_ratio(0.001, 4000, 0.00102, 4000)
    F = (0.00102 / 0.001) ** 2
    assert vr["p_value"] == pytest.approx(2 * stats.f.sf(F, 4000, 4000), rel=1e-9)
    eq = equivalence(0.001, 4000, 0.00102, 4000, margin=0.1)
    assert eq["equivalent"] and eq["p_value"] == pytest.approx(max(stats.f.sf(F * 1.1 ** 2, 4000, 4000),
                                                                   stats.f.cdf(F / 1.1 ** 2, 4000, 4000)), rel=1e-9)
    assert not equivalence(0.001, 50, 0.00102, 50, margin=0.1)["equivalent"]  # too few degrees of freedom to tell
