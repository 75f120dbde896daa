"""Which backend, with which parameters, reaches a given accuracy most cheaply for a given problem?

``advise(frame, query)`` answers from stored measurements (``Store.results_frame()``); it never
runs a solver. For every backend it looks for measured ground-state energies that reached the
requested relative error by the rule of ``bench.verdicts`` (against a reference at least ten
times tighter than the accuracy; a result vouched for only by its own error bar is unverified and
never counts), in this order of evidence:

1. ``measured``: the same problem (particle numbers, masses, g) -> confidence high;
2. ``nearby g``: the same particle numbers and masses at the closest measured g -> medium when
   |g - g_measured| <= 0.5 + 0.25 |g|, else low (accuracy at fixed parameters usually degrades as
   |g| grows, so the parameters may not carry over);
3. ``extrapolated``: other particle numbers with the same masses -> a cost model fitted to the
   cheapest qualifying run at each measured N (least squares on log cost,
   ``extrapolation.fit_line``: exponential a b^N, and a power law a N^p when at least three N are
   measured; the one with the smaller residual is used) predicts the cost at the requested N;
   confidence low, and the parameters are those that sufficed at the largest measured N (a larger
   N usually needs more). Measurements at other masses are not carried over: a mass imbalance can
   change what converges (a bound trimer, a heavy pair).

A backend is "reliable" unless its error bars are flagged by ``verdicts.error_bar_calibration``
(|E - ref| within 2 error bars in fewer than 95 % of the reference-checked results, at the
requested N when it was checked there, else over every N); unreliable backends rank after
reliable ones whatever their cost. Installed backends are asked ``admits(problem)`` first and
drop out with their reason. Backends whose results could only be unverified are listed with their
own error bars among the rejected, so the user sees what a reference would have to confirm.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field

import numpy as np
import pandas as pd

from ..backends.extrapolation import fit_line
from .tables import attach_references, successful_ground_states
from .verdicts import COVERAGE_TARGET, REACHED, UNVERIFIED, error_bar_calibration, judge_frame

CONFIDENCE_RANK = {"high": 0, "medium": 1, "low": 2}


@dataclass(frozen=True)
class Query:
    n_up: int
    n_down: int
    mass_up: float = 1.0
    mass_down: float = 1.0
    g: float = 0.0
    accuracy: float = 1e-4

    @property
    def n(self) -> int:
        return self.n_up + self.n_down

    def problem(self):
        from ..problems.spec import Problem

        return Problem.create(self.n_up, self.n_down, self.g, mass_up=self.mass_up, mass_down=self.mass_down)


@dataclass
class Recommendation:
    backend: str
    params: str
    evidence: str
    confidence: str
    cpu_s: float | None
    peak_mib: float | None
    accuracy: float | None
    reliable: bool
    reasons: list[str] = field(default_factory=list)


@dataclass
class Advice:
    query: Query
    recommendations: list[Recommendation]
    rejected: dict[str, str]

    @property
    def best(self) -> Recommendation | None:
        return self.recommendations[0] if self.recommendations else None

    def table(self) -> pd.DataFrame:
        return pd.DataFrame([{
            "backend": r.backend, "params": r.params, "evidence": r.evidence, "confidence": r.confidence,
            "cpu_s": r.cpu_s, "peak_mib": r.peak_mib, "accuracy": r.accuracy, "reliable": r.reliable,
        } for r in self.recommendations])

    def explain(self) -> str:
        from .tables import to_markdown

        q = self.query
        head = (f"{q.n_up}+{q.n_down} fermions, masses {q.mass_up:g}/{q.mass_down:g}, g = {q.g:g},"
                f" relative accuracy {q.accuracy:g}")
        lines = [head, ""]
        if self.best is None:
            lines.append("No stored measurement reaches this accuracy for any backend that supports the problem;"
                         " run a suite that covers it (trapbench sweep) and ask again.")
        else:
            b = self.best
            cost = "unknown cost" if b.cpu_s is None else f"~{b.cpu_s:.3g} CPU s"
            memory = "" if b.peak_mib is None else f", ~{b.peak_mib:.0f} MiB"
            lines.append(f"Recommended: {b.backend} with {b.params or 'default parameters'} ({cost}{memory});"
                         f" confidence {b.confidence}.")
            lines += [f"  - {reason}" for reason in b.reasons]
            lines += ["", to_markdown(self.table())]
        if self.rejected:
            lines += ["", "Not recommended:"] + [f"  - {name}: {why}" for name, why in sorted(self.rejected.items())]
        return "\n".join(lines) + "\n"


def _fit_cost(ns: np.ndarray, costs: np.ndarray, n: int) -> tuple[float, str]:
    """Predicted cost at n from (ns, costs): exponential always, power law too with >= 3 points."""
    logs = np.log(np.maximum(costs, 1e-9))
    exponential = fit_line(ns, logs)
    models = [(exponential.residual, math.exp(exponential.intercept + exponential.slope * n),
               f"exponential fit cost ~ {math.exp(exponential.slope):.3g}^N")]
    if len(ns) >= 3:
        power = fit_line(np.log(ns), logs)
        models.append((power.residual, math.exp(power.intercept + power.slope * math.log(n)),
                       f"power-law fit cost ~ N^{power.slope:.2f}"))
    best = min(models, key=lambda m: m[0])
    return best[1], best[2]


def _reliability(calibration: pd.DataFrame, n: int) -> tuple[bool, str]:
    """Whether a backend's error bars cover the truth, from its rows of ``verdicts.error_bar_calibration``."""
    table = calibration[calibration["checked"] > 0]
    if table.empty:
        return True, "its error bars were never checked against a tight enough reference"
    here = table[table["N"] == n]
    scope = f"at N = {n}" if not here.empty else "over N = " + ", ".join(str(v) for v in table["N"])
    checked = int((here if not here.empty else table)["checked"].sum())
    within = int((here if not here.empty else table)["within 2 sigma"].sum())
    if within < COVERAGE_TARGET * checked:
        return False, (f"{checked - within} of {checked} reference-checked results {scope} lay outside the backend's own"
                       f" error bar doubled (coverage at 2 sigma {100 * within / checked:.0f} %, below"
                       f" {100 * COVERAGE_TARGET:.0f} %)")
    return True, f"{within} of {checked} reference-checked results {scope} lay within 2 of the backend's own error bars"


def _why_not(rows: pd.DataFrame, status: pd.Series, good: pd.DataFrame, query: Query) -> str:
    """Why a backend has no recommendation: unverified results, only other masses, or a best error above the target."""
    unverified = rows[status == UNVERIFIED]
    if not good.empty:
        return (f"reached {query.accuracy:g} only at other masses (m_up/m_down ="
                f" {', '.join(sorted({f'{u / d:.4g}' for u, d in zip(good['mass_up'], good['mass_down'])}))});"
                " a mass imbalance can change what converges, so no cost is carried over")
    if not unverified.empty:
        own = pd.to_numeric(unverified["own_rel_error"], errors="coerce").min()
        return (f"unverified: no reference within a tenth of {query.accuracy:g}"
                + ("" if pd.isna(own) else f"; its own error bar claims down to {own:.2g}")
                + " -- compare it with a tighter reference before relying on it")
    best = pd.to_numeric(rows["accuracy"], errors="coerce").min()
    return ("no stored run was measured against a reference" if pd.isna(best)
            else f"best stored relative error {best:.2g} misses {query.accuracy:g}")


def advise(frame: pd.DataFrame, query: Query, references=None) -> Advice:
    """Rank the backends for ``query`` from a results frame; see the module docstring."""
    from ..backends import registry

    if "accuracy" not in frame.columns:
        frame = attach_references(frame, references)
    ok = successful_ground_states(frame)
    calibration = error_bar_calibration(frame[(frame["status"] == "ok") & (frame["state"] >= 0)])
    problem = query.problem()
    recommendations, rejected = [], {}
    installed = set(registry.names())
    for backend, rows in ok.groupby("backend"):
        if backend in installed:
            try:
                support = registry.get(backend).admits(problem)
            except Exception as exc:  # a backend that cannot even say: leave it out, with the reason
                rejected[backend] = f"admits() failed: {exc}"
                continue
            if not support:
                rejected[backend] = f"does not support this problem: {support.reason}"
                continue
        reliable, reliability_note = _reliability(calibration[calibration["backend"] == backend], query.n)
        status = judge_frame(rows, query.accuracy)
        good = rows[status == REACHED]
        same_masses = good[np.isclose(good["mass_up"], query.mass_up) & np.isclose(good["mass_down"], query.mass_down)]
        same_species = same_masses[(same_masses["n_up"] == query.n_up) & (same_masses["n_down"] == query.n_down)]
        exact = same_species[np.isclose(same_species["g"], query.g, rtol=1e-9, atol=1e-12)]
        reasons = [reliability_note]
        if not exact.empty:
            pick = exact.loc[exact["cost_cpu_s"].idxmin()]
            confidence = "high"
            reasons.insert(0, f"measured on this very problem: relative error {pick['accuracy']:.2g} against a reference")
            evidence, cpu, peak = "measured", pick["cost_cpu_s"], pick["peak_mib"]
        elif not same_species.empty:
            distance = (same_species["g"] - query.g).abs()
            nearest = same_species[distance == distance.min()]
            pick = nearest.loc[nearest["cost_cpu_s"].idxmin()]
            close = abs(pick["g"] - query.g) <= 0.5 + 0.25 * abs(query.g)
            confidence = "medium" if close else "low"
            reasons.insert(0, f"measured at the nearest g = {pick['g']:g} (relative error {pick['accuracy']:.2g});"
                              " accuracy at fixed parameters usually worsens as |g| grows")
            evidence, cpu, peak = "nearby g", pick["cost_cpu_s"], pick["peak_mib"]
        elif not same_masses.empty:
            same_masses = same_masses.assign(n=same_masses["n_up"] + same_masses["n_down"])
            cheapest = same_masses.loc[same_masses.groupby("n")["cost_cpu_s"].idxmin()].sort_values("n")
            ns = cheapest["n"].to_numpy(float)
            below = cheapest[cheapest["n"] <= query.n]
            pick = (below if not below.empty else cheapest).iloc[-1]
            if len(ns) >= 2:
                cpu, model = _fit_cost(ns, cheapest["cost_cpu_s"].to_numpy(float), query.n)
                peak, _ = _fit_cost(ns, cheapest["peak_mib"].to_numpy(float), query.n)
                reasons.insert(0, f"no measurement at N = {query.n}; {model} over N = "
                                  f"{', '.join(str(int(x)) for x in ns)}; parameters that sufficed at N = {int(pick['n'])}"
                                  " (a larger N usually needs more)")
            else:
                cpu, peak = None, None
                reasons.insert(0, f"measured only at N = {int(ns[0])}; one point fixes no cost model")
            evidence, confidence = "extrapolated", "low"
        else:
            rejected[backend] = _why_not(rows, status, good, query)
            continue
        recommendations.append(Recommendation(
            backend=backend, params=pick["params_text"], evidence=evidence, confidence=confidence,
            cpu_s=None if cpu is None else float(cpu), peak_mib=None if peak is None else float(peak),
            accuracy=float(pick["accuracy"]), reliable=reliable, reasons=reasons,
        ))
        if not reliable:
            recommendations[-1].confidence = "low"
    recommendations.sort(key=lambda r: (not r.reliable, CONFIDENCE_RANK[r.confidence],
                                        math.inf if r.cpu_s is None else r.cpu_s))
    return Advice(query, recommendations, rejected)
