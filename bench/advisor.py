"""Which backend, with which parameters, reaches a given accuracy most cheaply for a given problem?

``advise(frame, query)`` answers from stored measurements (``Store.results_frame()``); it never
runs a solver. For every backend it looks for measured ground-state energies whose relative error
(against a reference when one exists, else the backend's own error bar; see ``tables``) is at most
the requested accuracy, in this order of evidence:

1. ``measured``: the same problem (particle numbers, masses, g) -> confidence high when the error
   was checked against a reference, medium when only the backend's own error bar vouches for it;
2. ``nearby g``: the same particle numbers and masses at the closest measured g -> medium when
   |g - g_measured| <= 0.5 + 0.25 |g|, else low (accuracy at fixed parameters usually degrades as
   |g| grows, so the parameters may not carry over);
3. ``extrapolated``: other particle numbers -> a cost model fitted to the cheapest qualifying run
   at each measured N (least squares on log cost: exponential a b^N, and a power law a N^p when at
   least three N are measured; the one with the smaller residual is used) predicts the cost at the
   requested N; confidence low, and the parameters are those that sufficed at the largest measured
   N (a larger N usually needs more).

A backend is "reliable" unless some of its results that carry an error bar missed their reference
by more than that bar; unreliable backends rank after reliable ones whatever their cost. Installed
backends are asked ``supports(problem)`` first and drop out with their reason.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field

import numpy as np
import pandas as pd

from .tables import attach_references, successful_ground_states

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
    models = []
    slope, intercept = np.polyfit(ns, logs, 1)
    residual = float(np.sum((logs - (intercept + slope * ns)) ** 2))
    models.append((residual, math.exp(intercept + slope * n), f"exponential fit cost ~ {math.exp(slope):.3g}^N"))
    if len(ns) >= 3:
        p, c = np.polyfit(np.log(ns), logs, 1)
        residual_p = float(np.sum((logs - (c + p * np.log(ns))) ** 2))
        models.append((residual_p, math.exp(c + p * math.log(n)), f"power-law fit cost ~ N^{p:.2f}"))
    best = min(models, key=lambda m: m[0])
    return best[1], best[2]


def _reliability(rows: pd.DataFrame) -> tuple[bool, str]:
    checked = rows[rows["within_error_bar"].notna()]
    if checked.empty:
        return True, "its error bars were never checked against a reference"
    misses = int((~checked["within_error_bar"].astype(bool)).sum())
    if misses:
        return False, f"{misses} of {len(checked)} reference-checked results fell outside the backend's own error bar"
    return True, f"all {len(checked)} reference-checked results lay within the backend's own error bar"


def advise(frame: pd.DataFrame, query: Query, references=None) -> Advice:
    """Rank the backends for ``query`` from a results frame; see the module docstring."""
    from ..backends import registry

    if "accuracy" not in frame.columns:
        frame = attach_references(frame, references)
    ok = successful_ground_states(frame)
    problem = query.problem()
    recommendations, rejected = [], {}
    installed = set(registry.names())
    for backend, rows in ok.groupby("backend"):
        if backend in installed:
            try:
                support = registry.get(backend).supports(problem)
            except Exception as exc:  # a backend that cannot even say: leave it out, with the reason
                rejected[backend] = f"supports() failed: {exc}"
                continue
            if not support:
                rejected[backend] = f"does not support this problem: {support.reason}"
                continue
        reliable, reliability_note = _reliability(rows)
        good = rows[rows["accuracy"] <= query.accuracy]
        same_species = good[(good["n_up"] == query.n_up) & (good["n_down"] == query.n_down)
                            & np.isclose(good["mass_up"], query.mass_up) & np.isclose(good["mass_down"], query.mass_down)]
        exact = same_species[np.isclose(same_species["g"], query.g, rtol=1e-9, atol=1e-12)]
        reasons = [reliability_note]
        if not exact.empty:
            pick = exact.loc[exact["cost_cpu_s"].idxmin()]
            confidence = "high" if pick["error_basis"] == "reference" else "medium"
            reasons.insert(0, f"measured on this very problem: relative error {pick['accuracy']:.2g}"
                              f" ({pick['error_basis']})")
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
        elif not good.empty:
            good = good.assign(n=good["n_up"] + good["n_down"])
            cheapest = good.loc[good.groupby("n")["cost_cpu_s"].idxmin()].sort_values("n")
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
            best = rows["accuracy"].min()
            rejected[backend] = ("no stored run reached the accuracy" if pd.isna(best)
                                 else f"best stored relative error {best:.2g} misses {query.accuracy:g}")
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
