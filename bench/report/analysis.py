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

MAP_TARGETS = (1e-3, 1e-5)
SCALING_ACCURACY = 1e-3
SCALING_MAX_STATES = 4


def target_label(target: float) -> str:
    return f"{target:.0e}"


def calibration(frame: pd.DataFrame) -> pd.DataFrame:
    """``verdicts.error_bar_calibration`` over the successful results of the frame (every level)."""
    return error_bar_calibration(frame[(frame["status"] == "ok") & (frame["state"] >= 0)])


def method_map(frame: pd.DataFrame, targets: tuple[float, ...] = MAP_TARGETS) -> pd.DataFrame:
    """The backend to use for each relative error, per particle number N and mass ratio m_up/m_down.

    For each backend and single-g problem of the group, the cheapest stored run (solve CPU time) that
    reached the target (``verdicts``). The backend named is the one that reached it on the most
    problems of the group (ties: the cheaper), "k of M" saying how many when not all; its cost is the
    largest over those problems of the cheapest qualifying run. The other backends that reached the
    target are listed with their counts, then those whose results there are unverified (no reference
    ten times tighter than the target). The last column names the backends whose error bars at this N
    cover |E - ref| at 2 sigma in fewer than 95 % of the checked results.
    """
    ok = successful_ground_states(frame)
    if ok.empty:
        return pd.DataFrame(columns=["N", "N_up+N_down", "mass ratio", "problems"])
    ok = ok.assign(n=ok["n_up"] + ok["n_down"], ratio=[mass_ratio(r) for r in ok.to_dict("records")])
    flagged = poorly_calibrated(calibration(frame))
    rows = []
    for (n, ratio), group in ok.groupby(["n", "ratio"]):
        total = group["problem_key"].nunique()
        row = {"N": int(n), "N_up+N_down": ", ".join(sorted({f"{a}+{b}" for a, b in zip(group["n_up"], group["n_down"])})),
               "mass ratio": ratio_text(float(ratio)), "problems": total}
        for target in targets:
            status = judge_frame(group, target)
            reaching, unverified = [], []
            for backend, runs in group.groupby("backend"):
                good = runs[status[runs.index] == REACHED]
                if not good.empty:
                    cost = good.groupby("problem_key")["cost_cpu_s"].min().max()
                    reaching.append((-good["problem_key"].nunique(), cost, backend))
                elif (status[runs.index] == UNVERIFIED).any():
                    unverified.append(backend)
            reaching.sort()
            label = target_label(target)

            def named(entry) -> str:
                count = -entry[0]
                return entry[2] + ("" if count == total else f" ({count} of {total})")

            row[f"backend at {label}"] = named(reaching[0]) if reaching else "none"
            row[f"CPU s at {label}"] = reaching[0][1] if reaching else None
            row[f"also reaching {label}"] = ", ".join(named(e) for e in reaching[1:])
            row[f"unverified at {label}"] = ", ".join(unverified)
        row["error bars below 95 % at 2 sigma"] = ", ".join(
            f"{backend} ({share})" for (backend, count), share in sorted(flagged.items()) if count == n
            and backend in set(group["backend"]))
        rows.append(row)
    return pd.DataFrame(rows)


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
