"""The verdict rule and the error-bar calibration, and that the tables, method map and advice obey them.

All numbers are synthetic and chosen so that each expected outcome follows by hand from the rule
(a reference decides a threshold only when its uncertainty is at most a tenth of it; common
practice, no source) -- no physics value is involved.
"""

from __future__ import annotations

import math

import numpy as np
import pandas as pd
import pytest

from trapbench.bench import verdicts
from trapbench.bench.verdicts import MISSED, NO_MEASURE, REACHED, UNVERIFIED, error_bar_calibration, judge, judge_frame

# ----------------------------------------------------------------------------- the rule, one result at a time


def test_a_reference_too_loose_for_the_threshold_leaves_the_result_unverified():
    # |E - ref| = 1e-4 and an own bar of 1e-6 would pass 1e-3 -- but the reference is only known to 2e-4 > 1e-3 / 10
    verdict = judge(1e-4, 2e-4, 1e-6, 1e-3)
    assert verdict.status == UNVERIFIED and not verdict.reached
    assert verdict.own_error == 1e-6 and "own error bar 1e-06" in verdict.text()


def test_a_reference_a_tenth_of_the_threshold_measures_the_error():
    assert judge(5e-4, 1e-4, None, 1e-3).status == REACHED  # bound 6e-4 <= 1e-3, u_ref = threshold / 10 exactly
    assert judge(9.5e-4, 1e-4, None, 1e-3).status == MISSED  # bound 1.05e-3 > 1e-3: the reference's doubt counts
    assert judge(0.0, 0.0, None, 1e-12).status == REACHED  # an exact reference decides any threshold
    assert judge(5e-4, 1e-4, None, 1e-3).error == pytest.approx(6e-4)


def test_a_loose_reference_still_proves_a_miss_far_outside_it():
    # the true value lies within 0.02 of the reference, the result 0.4 away: its error is at least 0.38 > 1e-3
    assert judge(0.4, 0.02, 1e-6, 1e-3).status == MISSED
    assert judge(0.015, 0.02, 1e-6, 1e-3).status == UNVERIFIED


def test_without_a_reference_the_own_error_bar_never_counts():
    assert judge(None, None, 1e-12, 1e-3).status == UNVERIFIED
    assert judge(None, None, None, 1e-3).status == NO_MEASURE
    assert judge(None, None, math.nan, 1e-3).status == NO_MEASURE


def test_bad_input_names_the_field():
    with pytest.raises(ValueError, match="threshold"):
        judge(1e-4, 0.0, None, 0.0)
    with pytest.raises(ValueError, match="reference_uncertainty"):
        judge(1e-4, None, None, 1e-3)


def test_the_frame_form_agrees_with_judge_row_by_row():
    rng = np.random.default_rng(7)
    size = 400
    frame = pd.DataFrame({"rel_error": 10.0 ** rng.uniform(-8, -1, size),
                          "ref_rel_uncertainty": 10.0 ** rng.uniform(-9, -1, size),
                          "own_rel_error": 10.0 ** rng.uniform(-9, -1, size)})
    frame.loc[::5, ["rel_error", "ref_rel_uncertainty"]] = np.nan  # no reference
    frame.loc[::7, "own_rel_error"] = np.nan  # no error bar
    for threshold in (1e-5, 1e-3):
        statuses = judge_frame(frame, threshold)
        expected = [judge(None if math.isnan(r.rel_error) else r.rel_error,
                          None if math.isnan(r.ref_rel_uncertainty) else r.ref_rel_uncertainty,
                          r.own_rel_error, threshold).status for r in frame.itertuples()]
        assert list(statuses) == expected
        assert {REACHED, MISSED, UNVERIFIED, NO_MEASURE} <= set(statuses)  # every branch exercised


# ----------------------------------------------------------------------------- calibration


def calibration_rows():
    """Backend 'wide' (N = 2): |E - ref| = 0.5, 1, 3, 0 bars; 'narrow' (N = 3): 3 of 4 outside 2 bars."""
    rows = []

    def add(backend, n_up, n_down, bar, deviation, uncertainty=0.0):
        rows.append({"backend": backend, "n_up": n_up, "n_down": n_down, "error_bar": bar, "abs_error": deviation,
                     "ref_effective_uncertainty": uncertainty})

    for deviation in (0.5e-6, 1e-6, 3e-6, 0.0):
        add("wide", 1, 1, 1e-6, deviation)
    add("wide", 1, 1, 1e-6, 5e-6, uncertainty=1e-6)  # 1e-6 > 2 bars / 10: too loose, not counted
    add("wide", 1, 1, None, 1e-6)  # no error bar: ignored
    add("wide", 1, 1, 1e-6, None, None)  # no reference: ignored
    for deviation in (0.1e-6, 3e-6, 5e-6, 9e-6):
        add("narrow", 2, 1, 1e-6, deviation)
    return pd.DataFrame(rows)


def test_calibration_counts_coverage_at_two_sigma_and_the_median_width():
    table = error_bar_calibration(calibration_rows()).set_index("backend")
    wide, narrow = table.loc["wide"], table.loc["narrow"]
    assert (wide["N"], wide["with error bar"], wide["checked"], wide["too loose a reference"]) == (2, 6, 4, 1)
    assert wide["within 2 sigma"] == 3 and wide["coverage at 2 sigma"] == pytest.approx(0.75)
    # bar / |E - ref| = 2, 1, 1/3, inf: median (1 + 2) / 2
    assert wide["median bar/abs(E - ref)"] == pytest.approx(1.5)
    assert (narrow["N"], narrow["checked"], narrow["within 2 sigma"]) == (3, 4, 1)
    assert narrow["median bar/abs(E - ref)"] == pytest.approx((1 / 3 + 1 / 5) / 2)
    assert wide["flag"] == "below 95 %" and narrow["flag"] == "below 95 %"
    assert verdicts.poorly_calibrated(error_bar_calibration(calibration_rows())) == {
        ("narrow", 3): "1/4 = 25 %", ("wide", 2): "3/4 = 75 %"}


def test_calibration_does_not_flag_honest_error_bars():
    rows = calibration_rows()
    honest = rows[rows["backend"] == "wide"].assign(error_bar=lambda f: f["error_bar"] * 2)  # 3e-6 now inside 2 bars
    table = error_bar_calibration(honest)
    assert table["coverage at 2 sigma"].iloc[0] == pytest.approx(1.0) and table["flag"].iloc[0] == ""


# ----------------------------------------------------------------------------- the rule in the tables and the advice


class LooseOrTight:
    """References for 2+1 at g = 20: a tight one (exact) or a loose asymptotic one (2 % uncertainty)."""

    def __init__(self, value, uncertainty):
        self.value, self.uncertainty = value, uncertainty

    def __call__(self, problem):
        from trapbench.problems.references import Reference

        return [Reference("energy", 0, self.value, self.uncertainty, "synthetic", "exact" if not self.uncertainty else
                          "derived")]


def stored_frame(energies_and_bars, backend="ladder", mass_up=1.0):
    """A results frame as Store.results_frame makes it: one 2+1 problem at g = 20, one run per (energy, bar)."""
    from trapbench.problems.spec import Problem

    problem = Problem.create(2, 1, 20.0, mass_up=mass_up)
    rows = []
    for i, (energy, bar) in enumerate(energies_and_bars):
        rows.append({"task_key": f"{backend}{i}", "problem_key": problem.key, "problem": problem.to_dict(),
                     "problem_name": "2+1 g=20", "n_up": 2, "n_down": 1, "mass_up": mass_up, "mass_down": 1.0,
                     "g": 20.0, "backend": backend, "params_text": f"cutoff={10 * (i + 1)}", "status": "ok",
                     "state": 0, "energy": energy, "energy_error": bar, "error_estimate": bar,
                     "solve_cpu_s": float(i + 1), "cpu_time_s": float(i + 1), "solve_wall_s": float(i + 1),
                     "peak_rss_bytes": (i + 1) << 20})
    return pd.DataFrame(rows)


def test_tables_method_map_and_advice_never_count_an_unverified_result():
    from trapbench.bench.advisor import Query, advise
    from trapbench.bench.report.analysis import method_map
    from trapbench.bench.tables import accuracy_vs_cost_table, attach_references

    runs = [(4.0 + 2e-3, 1e-3), (4.0 + 1e-5, 1e-5), (4.0 + 1e-7, 1e-7)]  # relative errors ~5e-4, 2.5e-6, 2.5e-8
    loose = attach_references(stored_frame(runs), LooseOrTight(4.0, 0.08))  # 2 % of E: decides nothing below 0.2
    tight = attach_references(stored_frame(runs), LooseOrTight(4.0, 0.0))

    table = accuracy_vs_cost_table(loose, thresholds=(1e-3, 1e-5)).set_index("target")
    assert list(table["verdict"]) == [UNVERIFIED, UNVERIFIED]
    assert table.loc[1e-5, "own_error"] == pytest.approx(1e-7 / (4.0 + 1e-7))  # the best own bar is shown beside it
    assert table["cpu_s"].isna().all()
    table = accuracy_vs_cost_table(tight, thresholds=(1e-3, 1e-5)).set_index("target")
    assert list(table["verdict"]) == [REACHED, REACHED]
    assert list(table["params"]) == ["cutoff=10", "cutoff=20"]  # the cheapest run below each threshold

    loose_map, tight_map = method_map(loose).set_index("target"), method_map(tight).set_index("target")
    assert loose_map.loc[1e-3, "backend"] == "none" and loose_map.loc[1e-3, "unverified"] == "ladder"
    assert tight_map.loc[1e-5, "backend"] == "ladder" and tight_map.loc[1e-5, "CPU s"] == 2.0
    assert tight_map.loc[1e-5, "peak MiB"] == 2.0  # the cheapest run below 1e-5 is the second: 2 MiB

    query = Query(2, 1, g=20.0, accuracy=1e-4)
    refused = advise(loose, query)
    assert refused.best is None and refused.rejected["ladder"].startswith("unverified")
    assert advise(tight, query).best.params == "cutoff=20"


def test_miscalibrated_backend_is_flagged_in_the_map_and_ranked_last_by_advise():
    from trapbench.bench.advisor import Query, advise
    from trapbench.bench.report.analysis import method_map
    from trapbench.bench.tables import attach_references

    # 'overconfident' is cheaper but misses the exact reference by 10 of its bars; 'honest' covers it
    frame = pd.concat([stored_frame([(4.0 + 1e-6, 1e-7)], backend="overconfident"),
                       stored_frame([(4.0 + 1e-6, 1e-6)], backend="honest").assign(solve_cpu_s=5.0)])
    frame = attach_references(frame.reset_index(drop=True), LooseOrTight(4.0, 0.0))
    row = method_map(frame).set_index("target").loc[1e-3]
    assert row["backend"] == "overconfident"  # the map still names the cheapest that reached it ...
    assert row["runner-up"] == "honest" and row["runner-up CPU s"] == 5.0
    assert row["error bars below 95 % at 2 sigma"] == "overconfident (0/1 = 0 %)"  # ... and flags its error bars
    advice = advise(frame, Query(2, 1, g=20.0, accuracy=1e-4))
    assert [r.backend for r in advice.recommendations] == ["honest"]  # a flagged backend is never recommended
    assert "coverage at 2 sigma 0 %" in advice.rejected["overconfident"]


def test_advice_carries_no_cost_over_from_other_masses():
    from trapbench.bench.advisor import Query, advise
    from trapbench.bench.tables import attach_references

    frame = attach_references(stored_frame([(4.0 + 1e-7, 1e-7)]), LooseOrTight(4.0, 0.0))
    advice = advise(frame, Query(2, 1, mass_up=20 / 3, g=20.0, accuracy=1e-4))
    assert advice.best is None and "only at other masses" in advice.rejected["ladder"]


def test_cost_against_particle_number_keeps_unverified_costs_apart():
    # common practice, no source: a made-up frame. N = 2 is decided by a tight reference; N = 10 has none,
    # so its cost appears only in the own-error-bar columns, from the cheapest run whose bar is within 1e-3
    from trapbench.bench.tables import cost_vs_particle_number_table

    def row(key, n_up, rel_error, ref_unc, own, cpu):
        return {"backend": "m", "problem_key": key, "n_up": n_up, "n_down": n_up, "status": "ok", "state": 0,
                "rel_error": rel_error, "ref_rel_uncertainty": ref_unc, "own_rel_error": own,
                "solve_cpu_s": cpu, "cpu_time_s": cpu, "peak_rss_bytes": 2**20 * cpu}

    nan = float("nan")
    frame = pd.DataFrame([
        row("a", 1, 2e-4, 1e-6, 5e-4, 1.0), row("a", 1, 5e-5, 1e-6, 1e-4, 4.0),
        row("b", 5, nan, nan, 3e-3, 10.0), row("b", 5, nan, nan, 8e-4, 50.0), row("b", 5, nan, nan, 2e-4, 90.0),
    ])
    table = cost_vs_particle_number_table(frame, accuracy=1e-3).set_index("n")
    assert table.loc[2, "cpu_s"] == 1.0 and table.loc[2, "problems_reached"] == "1/1"
    assert pd.isna(table.loc[2, "cpu_s_own_bar"])
    assert pd.isna(table.loc[10, "cpu_s"]) and table.loc[10, "problems_unverified"] == "1/1"
    assert table.loc[10, "cpu_s_own_bar"] == 50.0 and table.loc[10, "peak_mib_own_bar"] == 50.0
