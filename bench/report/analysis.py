"""The report's analysis: results frame in, table out (method map, agreement, cost problems, calibration).

The frame is ``tables.attach_references(store.results_frame())``. Whether a result reaches a
relative error is decided by ``verdicts`` everywhere here: only against a reference at least ten
times tighter than the target; results without one are "unverified" and reach nothing.
"""

from __future__ import annotations

import pandas as pd

from ..tables import successful_ground_states
from ..verdicts import REACHED, UNVERIFIED, error_bar_calibration, judge_frame, poorly_calibrated
from .figures import mass_ratio, ratio_text

MAP_TARGETS = (1e-2, 1e-3, 1e-4, 1e-5, 1e-6)
SCALING_ACCURACY = 1e-3
SCALING_MAX_STATES = 4


def target_label(target: float) -> str:
    return f"{target:.0e}"


def calibration(frame: pd.DataFrame) -> pd.DataFrame:
    """``verdicts.error_bar_calibration`` over the successful results of the frame (every level)."""
    return error_bar_calibration(frame[(frame["status"] == "ok") & (frame["state"] >= 0)])


def dataset_status() -> pd.DataFrame:
    """Where the shipped reference dataset stands, per configuration: grid points measured, levels by status,
    and the relative uncertainty of the published levels against the goal for that particle number."""
    from ...problems import dataset

    shipped = dataset.load()
    grid: dict[str, int] = {}
    for problem in dataset.dataset_problems():
        config = f"{problem.up.count}+{problem.down.count}"
        grid[config] = grid.get(config, 0) + len(problem.points())
    rows = pd.DataFrame(dataset.summary_rows(shipped))
    out = []
    for config, points in grid.items():
        mine = rows[rows["config"] == config] if not rows.empty else rows
        measured = {e.key for e in shipped.entries if f"{e.n_up}+{e.n_down}" == config}
        published = mine[mine["status"] != "open"] if not mine.empty else mine
        relative = pd.to_numeric(published["relative"], errors="coerce") if not published.empty else pd.Series(dtype=float)
        goal = dataset.UNCERTAINTY_GOALS.get(sum(int(n) for n in config.split("+")))
        out.append({"config": config, "grid points": points, "measured": len(measured),
                    "levels published": len(published), "levels open": 0 if mine.empty else int((mine["status"] == "open").sum()),
                    "median relative uncertainty": float(relative.median()) if len(relative) else None,
                    "worst": float(relative.max()) if len(relative) else None, "goal": goal,
                    "within goal": int((relative <= goal).sum()) if len(relative) and goal else 0,
                    **_precision_checks(mine)})
    return pd.DataFrame(out).astype({"precision levels checked": "Int64", "checks within 2 bars": "Int64"})


def _precision_checks(rows: pd.DataFrame) -> dict[str, int | None]:
    """Precision levels checked by another method family, and how many of those checks lie within twice the
    checking method's bar (``dataset.summary_rows``' check_sigmas); None where the configuration has none."""
    precision = rows[rows["status"] == "precision"] if not rows.empty else rows
    if precision.empty:
        return {"precision levels checked": None, "checks within 2 bars": None}
    sigmas = pd.to_numeric(precision["check_sigmas"], errors="coerce")
    return {"precision levels checked": int(sigmas.notna().sum()), "checks within 2 bars": int((sigmas <= 2).sum())}


def dataset_disagreements() -> pd.DataFrame:
    """``problems.dataset.disagreements`` of the shipped reference dataset, as a table."""
    from ...problems import dataset

    return _disagreement_table(dataset.disagreements(dataset.load()))


def stored_disagreements(frame: pd.DataFrame) -> pd.DataFrame:
    """``problems.dataset.stored_disagreements`` of the frame's successful levels, as a table."""
    from ...problems import dataset

    rows = frame[(frame["status"] == "ok") & (frame["state"] >= 0)].to_dict("records")
    return _disagreement_table(dataset.stored_disagreements(rows))


def _disagreement_table(rows: list[dict]) -> pd.DataFrame:
    """Disagreement rows as shown in the report (the label columns replace the raw counts and masses)."""
    return pd.DataFrame(rows).drop(columns=["n_up", "n_down", "mass_up", "mass_down"], errors="ignore")


def method_map(frame: pd.DataFrame, targets: tuple[float, ...] = MAP_TARGETS) -> pd.DataFrame:
    """The backend to use, per particle number N, mass ratio m_up/m_down, g regime and relative-error target.

    One row per (N, mass ratio, g regime, target); the g regimes are the advisor's (``advisor.g_regime``:
    attractive g < 0, non-interacting g = 0, weak 0 < g <= 3, strong g > 3). For each backend and single-g problem of the group,
    the cheapest stored run (solve CPU time) that reached the target (``verdicts``). Backends are ranked by
    the number of problems of the group on which they reached it, then by cost: the first is named with
    its cost (the largest over those problems of the cheapest qualifying run) and the peak memory of those
    runs, the second as the runner-up; "k of M" says on how many problems when not on all. Then the
    backends whose results there are unverified (no reference ten times tighter than the target), and
    those whose error bars at this N cover |E - ref| at 2 sigma in fewer than 95 % of the checked results.
    """
    from ..advisor import g_regime

    ok = successful_ground_states(frame)
    columns = ["N", "N_up+N_down", "mass ratio", "g regime", "problems", "target", "backend", "CPU s", "peak MiB",
               "runner-up", "runner-up CPU s", "unverified", "error bars below 95 % at 2 sigma"]
    if ok.empty:
        return pd.DataFrame(columns=columns)
    ok = ok.assign(n=ok["n_up"] + ok["n_down"], ratio=[mass_ratio(r) for r in ok.to_dict("records")],
                   regime=[g_regime(float(g)) for g in ok["g"]])
    flagged = poorly_calibrated(calibration(frame))
    regime_order = {"attractive": 0, "non-interacting": 1, "weak": 2, "strong": 3}
    rows = []
    groups = sorted(ok.groupby(["n", "ratio", "regime"]), key=lambda item: (item[0][0], item[0][1], regime_order[item[0][2]]))
    for (n, ratio, regime), group in groups:
        total = group["problem_key"].nunique()
        flags = ", ".join(f"{backend} ({share})" for (backend, count), share in sorted(flagged.items())
                          if count == n and backend in set(group["backend"]))
        for target in targets:
            status = judge_frame(group, target)
            reaching, unverified = [], []
            for backend, runs in group.groupby("backend"):
                good = runs[status[runs.index] == REACHED]
                if not good.empty:
                    cheapest = good.loc[good.groupby("problem_key")["cost_cpu_s"].idxmin()]
                    reaching.append((-good["problem_key"].nunique(), cheapest["cost_cpu_s"].max(),
                                     cheapest["peak_mib"].max(), backend))
                elif (status[runs.index] == UNVERIFIED).any():
                    unverified.append(backend)
            reaching.sort()

            def named(entry) -> str:
                count = -entry[0]
                return entry[3] + ("" if count == total else f" ({count} of {total})")

            first = reaching[0] if reaching else None
            second = reaching[1] if len(reaching) > 1 else None
            rows.append({
                "N": int(n),
                "N_up+N_down": ", ".join(sorted({f"{a}+{b}" for a, b in zip(group["n_up"], group["n_down"])})),
                "mass ratio": ratio_text(float(ratio)),
                "g regime": regime,
                "problems": total,
                "target": target,
                "backend": named(first) if first else "none",
                "CPU s": first[1] if first else None,
                "peak MiB": first[2] if first else None,
                "runner-up": named(second) if second else "",
                "runner-up CPU s": second[1] if second else None,
                "unverified": ", ".join(unverified),
                "error bars below 95 % at 2 sigma": flags,
            })
    return pd.DataFrame(rows, columns=columns)


def agreement_by_source(frame: pd.DataFrame) -> list[tuple[str, pd.DataFrame]]:
    """One table per reference source: each stored energy with a reference, the most converged run per backend.

    Per single-g problem, level and backend the costliest run (the most converged parameters) is shown,
    with its verdict against the suite tolerance (``verdicts``: "unverified" when the reference is not
    ten times tighter than the tolerance) and the count of runs that agree.
    """
    ok = frame[(frame["status"] == "ok") & frame["ref_value"].notna()].copy()
    if ok.empty:
        return []
    ok["_cost"] = pd.to_numeric(ok["solve_cpu_s"], errors="coerce").fillna(0.0)
    out = []
    for source, rows in ok.groupby("ref_source", sort=False):
        picked = []
        for _, runs in rows.groupby(["problem_key", "state", "backend"], sort=False):
            last = runs.sort_values("_cost").iloc[-1]
            picked.append({"problem": last["problem_name"], "g": last["g"], "state": int(last["state"]),
                           "backend": last["backend"], "params": last["params_text"], "energy": last["energy"],
                           "error bar": last["error_bar"], "reference": last["ref_value"],
                           "ref uncertainty": last["ref_uncertainty"], "kind": last["ref_kind"],
                           "abs(E - ref)": last["abs_error"], "tolerance": last["allowed"],
                           "verdict": last["tolerance_verdict"], "within error bar": last["within_error_bar"],
                           "runs agreeing": f"{int((runs['tolerance_verdict'] == REACHED).sum())}/{len(runs)}"})
        out.append((str(source), pd.DataFrame(picked)))
    return out


def slope_agreement(frame: pd.DataFrame) -> pd.DataFrame:
    """dE0/dg at g = 0 (the stored scalar ``delta``, Hellmann-Feynman) against first-order perturbation theory."""
    from ...problems.references import FIRST_ORDER_SOURCE, first_order_slope
    from ...problems.spec import Problem

    column = "scalar.delta"
    if column not in frame:
        return pd.DataFrame()
    rows = []
    at_zero = frame[(frame["status"] == "ok") & (frame["state"] == 0) & (frame["g"] == 0.0) & frame[column].notna()]
    for r in at_zero.to_dict("records"):
        problem = Problem.from_dict(r["problem"])
        if not problem.trap.is_harmonic or problem.targets.parity != "any":
            continue
        reference = first_order_slope(problem)
        rows.append({"problem": r["problem_name"], "backend": r["backend"], "params": r["params_text"],
                     "⟨sum delta⟩ at g=0": r[column], "first-order c1": reference,
                     "abs(difference)": abs(r[column] - reference), "source": FIRST_ORDER_SOURCE})
    return pd.DataFrame(rows)


def cost_problems(frame: pd.DataFrame) -> list[str]:
    """Single-g problems where some backend was measured at two or more parameter sets (a trade-off curve)."""
    ok = successful_ground_states(frame)
    ok = ok[pd.to_numeric(ok["accuracy"], errors="coerce").notna() | pd.to_numeric(ok["own_rel_error"], errors="coerce").notna()]
    counts = ok.groupby(["problem_key", "backend"])["params_text"].nunique()
    keys = sorted({k for (k, _), n in counts.items() if n >= 2})
    order = ok.drop_duplicates("problem_key").set_index("problem_key")
    return sorted(keys, key=lambda k: (int(order.loc[k, "n_up"] + order.loc[k, "n_down"]), str(order.loc[k, "problem_name"]),
                                       float(order.loc[k, "g"])))


def benchmark_rows(frame: pd.DataFrame) -> pd.Series:
    """True for rows whose problem asks for at most SCALING_MAX_STATES levels and no observables."""
    def plain(problem) -> bool:
        targets = problem.get("targets", {}) if isinstance(problem, dict) else {}
        return int(targets.get("states", 1)) <= SCALING_MAX_STATES and not targets.get("observables")

    return pd.Series([plain(p) for p in frame["problem"]], index=frame.index, dtype=bool)
