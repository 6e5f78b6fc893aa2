"""The accuracy study of ``rtvoice fit`` scores what it claims (issue 18, "Accuracy, measured and published").

The scoring is checked against outside facts: cents as 1200 log2 of a frequency ratio (common
practice); |sin(k pi x / L)| = |sin(k pi (L - x) / L)| for whole k, so a place and its mirror image
leave the same comb (trigonometric identity, common practice; the pluck's and pickup's weights are
sin(k pi x / L): Fletcher & Rossing, "The Physics of Musical Instruments", 2nd ed. 1998, eq. 2.44, from
memory); sin(k pi p) sin(k pi q) is symmetric in p and q (Mohamad, Dixon & Harte, JASA 142(6), 3530,
2017); the 95th percentile against Python's ``statistics.quantiles`` (method "inclusive", the same
linear interpolation). Failures are counted from real refusals of the real fit (a silent take).
"""

from __future__ import annotations

import json
import math
import statistics
from dataclasses import replace

import numpy as np
import pytest

from rtvoice.bench import fit_accuracy as fa
from rtvoice.bench.fit_accuracy_report import summarise
from rtvoice.fit.synthetic import SyntheticTake, TakeTruth, draw_plan, plan_settings, truth_of

FS = 48000


def _truth(seed: int = 2, kind: str = "single", **changes: object) -> TakeTruth:
    """A take's truth without rendering it (the plan's settings say everything the truth holds)."""
    plan = replace(draw_plan(np.random.default_rng(seed), kind), **changes)  # type: ignore[arg-type]
    return truth_of(plan, plan_settings(plan, FS), plan.onset_s, 0.0)


def _perfect(truth: TakeTruth, **changes: object) -> dict:
    """The summary a perfect fit of ``truth`` would give, with ``changes``."""
    estimate = {"f0_hz": truth.f0_hz, "inharmonicity": truth.inharmonicity, "t60_low_s": truth.t60_low_s,
                "t60_high_s": truth.t60_high_s, "pluck_mm": truth.pluck_mm, "pickup_mm": truth.pickup_mm[0],
                "aperture_mm": truth.aperture_mm, "resonance_hz": truth.resonance_hz, "q": truth.q,
                "string": truth.string, "fret": truth.fret}
    return estimate | changes


def _comb(x_mm: float, length_mm: float, k: np.ndarray) -> np.ndarray:
    """|sin(k pi x / L)|: the weight a place leaves on partial k (Fletcher & Rossing 1998, from memory)."""
    return np.abs(np.sin(k * math.pi * x_mm / length_mm))


def test_a_perfect_estimate_scores_zero_on_every_estimate():
    truth = _truth(resonance_hz=3000.0, q=2.0)
    scores = fa.score("single", [truth], _perfect(truth), highest_usable_hz=8000.0)
    assert set(scores.errors) >= {fa.F0, fa.B, fa.T60_LOW, fa.T60_HIGH, fa.PICKUP, fa.PLUCK, fa.RESONANCE, fa.Q}
    assert all(e == pytest.approx(0.0, abs=1e-9) for v in scores.errors.values() for e in v), scores.errors
    assert scores.resonance == "scored" and not scores.swapped and not scores.wrong_fret


def test_errors_are_cents_and_percent_of_the_truth():
    truth = _truth(resonance_hz=3000.0, q=2.0)
    # 0.3 cent sharp is a ratio of 2^(0.3/1200) (common practice); B 4 % high, T60s 10 % short and 20 % long.
    est = _perfect(truth, f0_hz=truth.f0_hz * 2 ** (0.3 / 1200), inharmonicity=truth.inharmonicity * 1.04,
                   t60_low_s=truth.t60_low_s * 0.9, t60_high_s=truth.t60_high_s * 1.2, resonance_hz=3300.0, q=1.5)
    e = fa.score("single", [truth], est, highest_usable_hz=8000.0).errors
    assert e[fa.F0][0] == pytest.approx(0.3, abs=1e-9)
    assert e[fa.B][0] == pytest.approx(4.0) and e[fa.T60_LOW][0] == pytest.approx(10.0)
    assert e[fa.T60_HIGH][0] == pytest.approx(20.0)
    assert e[fa.RESONANCE][0] == pytest.approx(10.0) and e[fa.Q][0] == pytest.approx(25.0)


def test_f0_is_split_by_whether_the_take_beats():
    beating, plain = _truth(), _truth(beating=None)
    assert beating.beating is not None
    assert fa.F0_BEATING in fa.score("single", [beating], _perfect(beating), 0.0).errors
    plain_errors = fa.score("single", [plain], _perfect(plain), 0.0).errors
    assert fa.F0_ONE in plain_errors and fa.F0_BEATING not in plain_errors


def test_a_single_take_is_scored_as_the_unordered_pair():
    truth = _truth(pluck_mm=150.0, pickup_mm=(100.0,), fret=0)
    length = truth.speaking_length_mm
    k = np.arange(1, 41)
    # The comb cannot tell the two apart (symmetric in p and q: Mohamad, Dixon & Harte 2017) ...
    np.testing.assert_allclose(_comb(150.0, length, k) * _comb(100.0, length, k),
                               _comb(100.0, length, k) * _comb(150.0, length, k))
    # ... so a fit that calls the pluck the pickup is right: zero error, marked as swapped.
    swapped = fa.score("single", [truth], _perfect(truth, pickup_mm=150.0, pluck_mm=100.0), 0.0)
    assert swapped.errors[fa.PICKUP] == (0.0,) and swapped.errors[fa.PLUCK] == (0.0,) and swapped.swapped
    # Off by a little either way: the assignment with the smaller sum (swapped: the fit's 103 mm against
    # the pickup's 100, its 148 against the pluck's 150: 3 + 2, against 48 + 47 as fitted).
    near = fa.pair_score(148.0, 103.0, [100.0], 150.0, length)
    assert (near.pickup_mm, near.pluck_mm, near.swapped) == pytest.approx((3.0, 2.0, True))
    kept = fa.pair_score(101.0, 146.0, [100.0], 150.0, length)
    assert (kept.pickup_mm, kept.pluck_mm, kept.swapped) == pytest.approx((1.0, 4.0, False))


def test_a_place_is_scored_against_the_truth_or_its_mirror_image():
    length = 600.0
    k = np.arange(1, 41)
    # |sin(k pi x / L)| = |sin(k pi (L - x) / L)| for whole k (common practice): x and L - x leave one comb.
    np.testing.assert_allclose(_comb(420.0, length, k), _comb(180.0, length, k), atol=1e-12)
    assert fa.place_error_mm(180.0, 420.0, length) == pytest.approx(0.0)
    assert fa.place_error_mm(183.0, 420.0, length) == pytest.approx(3.0)
    assert fa.place_error_mm(417.0, 420.0, length) == pytest.approx(3.0)
    assert fa.place_error_mm(100.0, 120.0, length) == pytest.approx(20.0)  # the mirror (480) is farther


def test_a_pair_is_scored_against_the_nearer_true_pickup():
    truth = _truth(kind="pair", pluck_mm=160.0, pickup_mm=(40.0, 110.0), fret=0)
    e = fa.score("pair", [truth], _perfect(truth, pickup_mm=107.0, pluck_mm=161.0), 0.0).errors
    assert e[fa.PICKUP] == (pytest.approx(3.0),) and e[fa.PLUCK] == (pytest.approx(1.0),)


def test_a_group_is_scored_take_by_take_without_swapping():
    first = _truth(pluck_mm=60.0, pickup_mm=(100.0,), fret=0)
    group = [first, replace(first, pluck_mm=130.0), replace(first, pluck_mm=170.0)]
    right = fa.score("group", group, _perfect(first, pluck_mm=[61.0, 130.0, 168.0], pickup_mm=100.5), 0.0)
    assert right.errors[fa.PLUCK] == pytest.approx((1.0, 0.0, 2.0)) and right.errors[fa.PICKUP] == (0.5,)
    # The assignment is known for a group: plucks given in another order are errors, not a free choice.
    shuffled = fa.score("group", group, _perfect(first, pluck_mm=[130.0, 61.0, 168.0], pickup_mm=100.5), 0.0)
    assert shuffled.errors[fa.PLUCK][:2] == pytest.approx((70.0, 69.0))


def test_resonance_is_scored_only_where_the_take_shows_it():
    low_q = _truth(resonance_hz=3000.0, q=1.2)
    high_q = _truth(resonance_hz=3000.0, q=2.5)
    assert fa.score("single", [low_q], _perfect(low_q), 8000.0).resonance == "not scored"
    assert fa.score("single", [high_q], _perfect(high_q), 2500.0).resonance == "not scored"  # above the partials
    missed = fa.score("single", [high_q], _perfect(high_q, resonance_hz=None, q=None), 8000.0)
    assert missed.resonance == "missed" and fa.RESONANCE not in missed.errors


def test_error_statistics_match_the_standard_librarys_quantiles():
    values = [0.3, 2.0, 1.1, 7.5, 0.0, 4.2, 3.3, 9.9, 0.8, 5.1, 2.6]
    s = fa.error_stats(values)
    assert s["count"] == 11 and s["mean"] == pytest.approx(statistics.fmean(values))
    assert s["median"] == pytest.approx(statistics.median(values)) and s["max"] == 9.9
    assert s["p95"] == pytest.approx(statistics.quantiles(values, n=20, method="inclusive")[-1])
    assert fa.error_stats([])["mean"] is None


def _silent_case(seed: int, kind: str, index: int, seconds: float = 2.0) -> list[SyntheticTake]:
    """A take whose samples are silent: the real fit must refuse it."""
    truth = _truth(seed + index)
    return [SyntheticTake(np.zeros(FS), FS, truth, "")]


def test_failures_are_counted_and_listed_not_dropped(monkeypatch):
    real_build = fa.build_case

    def build(seed: int, kind: str, index: int, seconds: float = 2.0) -> list[SyntheticTake]:
        if kind == "single" and index == 1:
            return _silent_case(seed, kind, index)
        if kind == "pair":
            raise ValueError("the clean render peaks too high")
        return real_build(seed, kind, index, 0.6)

    monkeypatch.setattr(fa, "build_case", build)
    plan = fa.StudyPlan(singles=2, pairs=1, groups=0, seed=4)
    cases = fa.run_study(plan)
    assert [(c.kind, c.index) for c in cases] == [("single", 0), ("single", 1), ("pair", 0)]
    refused, unbuilt = cases[1], cases[2]
    assert refused.stage == "fit" and refused.failure is not None and refused.failure.startswith("TakeError")
    assert "silent" in refused.failure and unbuilt.stage == "build" and "peaks too high" in unbuilt.failure
    result = summarise(cases, plan)
    assert result["counts"]["failures"] == {"single": 1, "pair": 1, "group": 0}
    assert [(f["kind"], f["index"]) for f in result["failures"]] == [("single", 1), ("pair", 0)]
    assert result["stats"]["single"][fa.PICKUP]["count"] == 1  # the fitted take alone is scored


def test_an_unexpected_error_in_the_fit_is_counted_as_a_bug_and_its_warnings_kept(monkeypatch):
    def broken(takes, label):
        np.exp(np.array([1000.0]))  # numpy warns of the overflow (IEEE 754: exp(1000) > the largest double)
        raise ZeroDivisionError("division by zero")

    monkeypatch.setattr(fa, "fit_synthetic", broken)
    monkeypatch.setattr(fa, "build_case", _silent_case)
    case = fa.run_case(1, "single", 0)
    assert case.stage == "fit" and case.failure is not None and "a bug" in case.failure
    assert case.failure.startswith("ZeroDivisionError")
    assert len(case.warnings) == 1 and case.warnings[0].startswith("RuntimeWarning: overflow encountered in exp")
    assert "tests/test_fit_accuracy.py" in case.warnings[0] or "test_fit_accuracy.py" in case.warnings[0]


def test_cases_of_each_kind_come_from_their_own_stream_and_every_other_one_beats():
    single0, single1 = fa.build_case(3, "single", 0, 0.3), fa.build_case(3, "single", 1, 0.3)
    pair0 = fa.build_case(3, "pair", 0, 0.3)
    assert single0[0].truth.beating is not None and single1[0].truth.beating is None
    assert len(pair0[0].truth.pickup_mm) == 2
    assert single0[0].truth.pluck_mm != pair0[0].truth.pluck_mm
    again = fa.build_case(3, "single", 1, 0.3)
    assert np.array_equal(again[0].samples, single1[0].samples) and again[0].truth == single1[0].truth


def test_the_bench_option_runs_the_study_and_prints_the_table(monkeypatch, capsys, tmp_path):
    from rtvoice.cli import main

    monkeypatch.setenv("RTVOICE_BENCH_CHILD", "1")  # no re-run in a child process
    written = tmp_path / "fit.md"
    assert main(["bench", "--fit", "1", "--fit-pairs", "0", "--fit-groups", "1", "--seed", "2", "--json",
                 "--write", str(written)]) == 0
    result = json.loads(capsys.readouterr().out)
    assert result["plan"] == {"singles": 1, "pairs": 0, "groups": 1, "seed": 2, "seconds": 2.0, "takes_per_group": 3}
    assert result["counts"]["takes"] == 4 and len(result["cases"]) == 2
    assert result["command"] == f"rtvoice bench --json --write {written} --fit 1 --fit-pairs 0 --fit-groups 1 --seed 2"
    assert result["counts"]["failures"] == {"single": 0, "pair": 0, "group": 0}, result["failures"]
    table = written.read_text()
    header = next(line for line in table.splitlines() if line.startswith("| estimate"))
    assert [c.strip() for c in header.strip("|").split("|")] == ["estimate", "kind", "n", "mean", "median", "p95",
                                                                   "max", "goal (mean)", "met"]
    rows = {tuple(c.strip() for c in line.strip("|").split("|")[:3]) for line in table.splitlines()}
    assert ("pickup (mm)", "single", "1") in rows and ("pluck (mm)", "group", "3") in rows
    assert ("pickup (mm)", "pair", "0") in rows  # no pairs asked for: shown empty, never left out
    assert "<= 3 mm" in table and "<= 0.5 cent" in table


def test_the_study_options_go_with_fit(capsys):
    from rtvoice.cli import main

    assert main(["bench", "--seed", "3"]) == 2
    assert "--fit" in capsys.readouterr().err
    assert main(["bench", "--fit", "2", "--quick"]) == 2
