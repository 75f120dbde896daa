"""Which backend, with which parameters, reaches a given accuracy most cheaply for a given problem?

``advise(frame, query)`` answers from stored measurements; it never runs a solver. The measurements
are the method map shipped with the package (``problems/data/method_map.json``, built by
``trapbench map`` from a sweep of the ``map`` suite) plus, when given, the user's own store
(``measurements``). A measured ground-state energy counts for a backend only where it reached the
requested relative error by the rule of ``bench.verdicts`` (against a reference at least ten times
tighter than the accuracy; a result vouched for only by its own error bar is unverified and never
counts), and only on a problem **neighbouring** the one asked about:

- the same species counts: N_up and N_down equal, or swapped together with the masses (relabelling
  the species is an exact symmetry of the Hamiltonian);
- mass ratios m_up/m_down within a factor MASS_RATIO_FACTOR = 1.5 of each other (1, 2 and 20/3 are
  then three separate classes; a mass imbalance can change what converges: a bound trimer, a heavy pair);
- the same g regime (``g_regime``): attractive g < 0, non-interacting g = 0, weak 0 < g <= WEAK_MAX = 3,
  strong g > 3 (g in sqrt(hbar^3 omega/m0), m0 the lighter mass). The boundary 3 is a choice, common practice,
  no source: about where the equal-mass 1+1 ground energy has covered half its way from g = 0 to g = infinity.
  g = 0 stands alone because trap-orbital methods are exact there by construction: evidence from it would
  recommend them at any weak g whatever their interacting accuracy.
- a common trap frequency in a harmonic trap (the map measures nothing else).

Evidence, in this order: ``measured`` on the very problem (confidence high; mass ratios equal to within
SAME_RATIO = 1e-3 relative count as the same, so 6.667 asks about the measured 20/3); ``nearby g``: the same
masses, same regime, measured at a coupling at least as strong as asked (accuracy at fixed parameters
usually degrades as |g| grows) or within |g - g_measured| <= 0.5 + 0.25 |g| (confidence medium), else at a
weaker one (low); ``neighbouring masses``:
a mass ratio within the factor (low). Among the backend's qualifying runs the nearest neighbour wins
(same masses, then at least as strong a coupling, then the smaller mass-ratio and g distances), and
of its runs the cheapest. Its parameters, CPU time and peak memory are what the advice quotes. A run
qualifies only when every more converged run (smaller own error bar) of the same backend on the same problem
reached the accuracy too (the ladder has settled there): a run that met the reference by a lucky crossing of a non-monotone convergence,
which the next rung misses again, is not a recipe for a neighbouring problem.

A backend whose error bars are flagged by ``verdicts.error_bar_calibration`` on that class (|E - ref|
within 2 error bars in fewer than 95 % of the reference-checked results among its neighbouring
measurements) is never recommended: it is listed among the rejected with its coverage. Installed
backends are asked ``admits(problem)`` first. Where the reference dataset holds a neighbouring level at which
the recommended backend's method family and another exclude each other (``problems.dataset.disagreements``:
one of the two error bars misses, and nothing says which), the advice says so and its confidence is low. With no qualifying evidence the advice says so and
gives the sweep that would produce it (``evidence_sweep``).
"""

from __future__ import annotations

import json
import math
from dataclasses import dataclass, field
from importlib import resources

import numpy as np
import pandas as pd

from .tables import attach_references, successful_ground_states
from .verdicts import COVERAGE_TARGET, REACHED, UNVERIFIED, error_bar_calibration, judge_frame

CONFIDENCE_RANK = {"high": 0, "medium": 1, "low": 2}
MASS_RATIO_FACTOR = 1.5
WEAK_MAX = 3.0
NEAR_G_ABSOLUTE, NEAR_G_RELATIVE = 0.5, 0.25  # |g - g_measured| <= 0.5 + 0.25 |g| counts as close
SAME_RATIO = 1e-3  # mass ratios within this relative difference are the same masses (6.667 asks about 20/3)
MAP_RESOURCE = ("data", "method_map.json")
MAP_VERSION = "1"
NEIGHBOUR_RULE = (
    f"same species counts (or both counts and masses swapped), m_up/m_down within a factor {MASS_RATIO_FACTOR:g},"
    f" same g regime (attractive g < 0, non-interacting g = 0, weak 0 < g <= {WEAK_MAX:g}, strong g > {WEAK_MAX:g}),"
    " harmonic trap with a"
    " common frequency"
)
# The columns of a results frame the advice reads; the shipped table stores these for state 0 of each task.
TABLE_COLUMNS = (
    "backend", "backend_version", "problem_name", "n_up", "n_down", "mass_up", "mass_down", "g", "params", "params_text",
    "status", "state", "energy", "energy_error", "solve_cpu_s", "cpu_time_s", "peak_rss_bytes", "ref_value",
    "ref_source", "ref_effective_uncertainty", "abs_error", "rel_error", "ref_rel_uncertainty", "error_bar",
    "own_rel_error", "accuracy", "error_basis",
)
# the columns ``graded_frame`` writes (the rest of a row is the measurement itself)
GRADE_COLUMNS = ("ref_value", "ref_source", "ref_effective_uncertainty", "abs_error", "rel_error", "ref_rel_uncertainty",
                 "error_bar", "own_rel_error", "accuracy", "error_basis")


def g_regime(g: float) -> str:
    """'attractive' (g < 0), 'non-interacting' (g = 0), 'weak' (0 < g <= WEAK_MAX) or 'strong' (g > WEAK_MAX).

    g = 0 is a class of its own: methods built on trap orbitals (oscillator basis, perturbation theory) are exact
    there by construction, so a measurement at g = 0 says nothing about their accuracy at any g != 0."""
    if g == 0:
        return "non-interacting"
    return "attractive" if g < 0 else "weak" if g <= WEAK_MAX else "strong"


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

    def to_dict(self) -> dict:
        return {"n_up": self.n_up, "n_down": self.n_down, "mass_up": self.mass_up, "mass_down": self.mass_down,
                "g": self.g, "accuracy": self.accuracy}


def neighbour_distance(query: Query, n_up, n_down, mass_up, mass_down, g) -> pd.Series:
    """|ln(ratio / query ratio)| per row for neighbouring problems (see the module docstring), NaN for the others.

    Rows are oriented as the query: a row with the species swapped counts with its mass ratio inverted.
    """
    n_up, n_down = np.asarray(n_up, int), np.asarray(n_down, int)
    ratio = np.log(np.asarray(mass_up, float) / np.asarray(mass_down, float))
    wanted = math.log(query.mass_up / query.mass_down)
    inf = np.full(len(ratio), np.inf)
    direct = np.where((n_up == query.n_up) & (n_down == query.n_down), np.abs(ratio - wanted), inf)
    swapped = np.where((n_up == query.n_down) & (n_down == query.n_up), np.abs(-ratio - wanted), inf)
    distance = np.minimum(direct, swapped)
    regimes = np.array([g_regime(float(v)) for v in np.asarray(g, float)], dtype=object)
    keep = (distance <= math.log(MASS_RATIO_FACTOR) + 1e-12) & (regimes == g_regime(query.g))
    return pd.Series(np.where(keep, distance, np.nan))


@dataclass
class Recommendation:
    backend: str
    params: str
    evidence: str
    confidence: str
    cpu_s: float | None
    peak_mib: float | None
    accuracy: float | None
    reasons: list[str] = field(default_factory=list)
    param_values: dict = field(default_factory=dict)
    measured_on: dict = field(default_factory=dict)


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
            "cpu_s": r.cpu_s, "peak_mib": r.peak_mib, "accuracy": r.accuracy,
        } for r in self.recommendations])

    def unverified(self) -> list[str]:
        """Backends measured on neighbouring problems whose results no reference was tight enough to judge."""
        return sorted(name for name, why in self.rejected.items() if why.startswith("unverified"))

    def solve_command(self, recommendation: Recommendation) -> str:
        q = self.query
        params = "".join(f" --param {k}={v}" for k, v in param_arguments(recommendation.param_values).items())
        return (f"trapbench solve --up {q.n_up} --down {q.n_down} --mass-up {q.mass_up!r} --mass-down"
                f" {q.mass_down!r} --g {q.g!r} --backend {recommendation.backend}{params}")

    def explain(self) -> str:
        from .tables import to_markdown

        q = self.query
        head = (f"{q.n_up}+{q.n_down} fermions, masses {q.mass_up:g}/{q.mass_down:g}, g = {q.g:g} ({g_regime(q.g)}),"
                f" relative accuracy {q.accuracy:g}")
        lines = [head, f"Neighbouring problems: {NEIGHBOUR_RULE}.", ""]
        if self.best is None:
            lines += ["No evidence: no stored measurement on a neighbouring problem reaches this accuracy for a backend"
                      " that supports the problem and whose error bars hold there."]
            unverified = self.unverified()
            if unverified:
                lines += [f"Measured but unverified: {', '.join(unverified)} ran on neighbouring problems, but no reference"
                          f" there is within a tenth of {q.accuracy:g} (see below). More of the same sweep will not settle"
                          f" it; tighter references would (the reference dataset: {dataset_sweeps()}), or ask"
                          " for a looser accuracy.", ""]
            else:
                lines += ["This sweep would produce it (then ask again with the same --store):", "",
                          "  " + evidence_command(q), ""]
        else:
            b = self.best
            cost = "unknown cost" if b.cpu_s is None else f"~{b.cpu_s:.3g} CPU s"
            memory = "" if b.peak_mib is None else f", ~{b.peak_mib:.0f} MiB"
            lines.append(f"Recommended: {b.backend} with {b.params or 'default parameters'} ({cost}{memory});"
                         f" confidence {b.confidence}.")
            lines += [f"  - {reason}" for reason in b.reasons]
            lines += [f"  Run: {self.solve_command(b)}", "", to_markdown(self.table())]
        if self.rejected:
            lines += ["", "Not recommended:"] + [f"  - {name}: {why}" for name, why in sorted(self.rejected.items())]
        return "\n".join(lines) + "\n"

    def to_json_dict(self) -> dict:
        """One object: the best backend, its ``--param`` values, expected cost and the evidence (None when none)."""
        b = self.best
        out = {"query": self.query.to_dict(), "neighbour_rule": NEIGHBOUR_RULE, "backend": None, "params": None,
               "expected_cpu_s": None, "expected_peak_mib": None, "confidence": None, "evidence": None,
               "command": None, "sweep_command": None,
               "alternatives": [{"backend": r.backend, "params": param_arguments(r.param_values), "cpu_s": r.cpu_s,
                                 "peak_mib": r.peak_mib, "confidence": r.confidence} for r in self.recommendations[1:]],
               "rejected": dict(sorted(self.rejected.items()))}
        if b is None:
            out["sweep_command"] = evidence_command(self.query)
            out["unverified"] = self.unverified()
            return out
        out.update(backend=b.backend, params=param_arguments(b.param_values), expected_cpu_s=b.cpu_s,
                   expected_peak_mib=b.peak_mib, confidence=b.confidence, command=self.solve_command(b),
                   evidence={"kind": b.evidence, "measured_on": b.measured_on, "relative_error_bound": b.accuracy,
                             "reasons": b.reasons})
        return out


def param_text(value) -> str:
    """One parameter as ``--param`` accepts it: lists comma-separated, booleans true/false, numbers exact."""
    if isinstance(value, (list, tuple)):
        return ",".join(param_text(v) for v in value)
    if isinstance(value, bool):
        return "true" if value else "false"
    if isinstance(value, float):
        return str(int(value)) if value.is_integer() and abs(value) < 1e15 else repr(value)
    return str(value)


def param_arguments(params: dict | None) -> dict[str, str]:
    """Parameter name -> value text for ``--param NAME=VALUE``, sorted by name."""
    return {k: param_text(v) for k, v in sorted((params or {}).items())}


def _params_dict(value) -> dict:
    if isinstance(value, dict):
        return value
    if isinstance(value, str) and value.startswith("{"):
        return json.loads(value)
    return {}


# ----------------------------------------------------------------------------- evidence


def _calibration_flag(rows: pd.DataFrame) -> str | None:
    """Why a backend's error bars fail on this class (coverage below 95 % at 2 sigma), or None."""
    needed = {"error_bar", "abs_error", "ref_effective_uncertainty"}
    if rows.empty or not needed <= set(rows.columns):
        return None
    table = error_bar_calibration(rows)
    checked, within = int(table["checked"].sum()), int(table["within 2 sigma"].sum())
    if checked and within < COVERAGE_TARGET * checked:
        return (f"error bars too narrow on this class: {checked - within} of {checked} reference-checked neighbouring"
                f" results lay outside twice the backend's own error bar (coverage at 2 sigma"
                f" {100 * within / checked:.0f} %, below {100 * COVERAGE_TARGET:.0f} %)")
    return None


def dataset_conflict(query: Query, backend: str) -> str | None:
    """A caution when the reference dataset holds neighbouring levels where ``backend``'s method family and another
    exclude each other (``problems.dataset.disagreements``): one of the two error bars misses there, and the
    dataset cannot say which, so the advice's confidence drops to low."""
    from ..problems import dataset

    rows = pd.DataFrame(dataset.disagreements(dataset.load()))
    if rows.empty:
        return None
    family = dataset.METHOD_FAMILIES.get(backend, backend)
    involved = np.array([family in {dataset.METHOD_FAMILIES.get(a, a), dataset.METHOD_FAMILIES.get(b, b)}
                         for a, b in zip(rows["method A"], rows["method B"])])
    near = neighbour_distance(query, rows["n_up"], rows["n_down"], rows["mass_up"], rows["mass_down"], rows["g"])
    hits = rows[involved & near.notna().to_numpy()]
    if hits.empty:
        return None
    worst = hits.loc[hits["sigmas"].idxmax()]
    return (f"caution: the reference dataset holds {len(hits)} neighbouring level(s) where this method family and"
            f" another differ by more than their combined error bars, so one of the two bars misses there (e.g."
            f" {worst['config']} at m_up/m_down = {worst['mass ratio']:.4g}, g = {worst['g']:g}, state {int(worst['state'])}:"
            f" {worst['method A']} {worst['E_A']:.6g} +- {worst['bar A']:.2g} against {worst['method B']}"
            f" {worst['E_B']:.6g} +- {worst['bar B']:.2g}); confidence lowered")


def _why_not(rows: pd.DataFrame, status: pd.Series, near: pd.Series, query: Query) -> str:
    """Why a backend has no recommendation: unverified, reached only on other problems, or best error above target."""
    reached = rows[status == REACHED]
    neighbours = rows[near.notna().to_numpy()]
    if neighbours.empty and not reached.empty:
        same_counts = reached[(reached["n_up"] + reached["n_down"]) == query.n]
        where = "only at other masses or couplings" if not same_counts.empty else "only at other particle numbers"
        shown = same_counts if not same_counts.empty else reached  # the closest evidence first
        return (f"reached {query.accuracy:g} {where}, none neighbouring: "
                + "; ".join(sorted({f"{int(r.n_up)}+{int(r.n_down)} m_up/m_down = {r.mass_up / r.mass_down:.4g}, g = {r.g:g}"
                                    for r in shown.itertuples()})[:6]))
    unverified = neighbours[status[neighbours.index] == UNVERIFIED]
    if not unverified.empty:
        from ..problems.dataset import PRECISION_METHODS

        own = pd.to_numeric(unverified["own_rel_error"], errors="coerce").min()
        backend = str(unverified["backend"].iloc[0])
        if backend in PRECISION_METHODS.get(query.n, ()):
            return (f"unverified at {query.accuracy:g}: it is the reference dataset's precision method for N = {query.n},"
                    " graded only by another method family's values of the same levels, and none on a neighbouring"
                    f" problem is within a tenth of {query.accuracy:g}"
                    + ("" if pd.isna(own) else f"; its own error bar claims down to {own:.2g}"))
        return (f"unverified: no reference within a tenth of {query.accuracy:g}"
                + ("" if pd.isna(own) else f"; its own error bar claims down to {own:.2g}")
                + " -- compare it with a tighter reference before relying on it")
    if neighbours.empty:
        return "no measurement on a neighbouring problem"
    best = pd.to_numeric(neighbours["accuracy"], errors="coerce").min()
    return ("no neighbouring run was measured against a reference" if pd.isna(best)
            else f"best stored relative error {best:.2g} on neighbouring problems misses {query.accuracy:g}")


def _settled(rows: pd.DataFrame, reached: pd.Series) -> pd.Series:
    """True for a run when it and every more converged run of the backend on the same problem reached the accuracy.

    "More converged" is a smaller own error bar (runs without one rank last): CPU time would order the rungs too,
    but timing noise reorders cheap runs.
    """
    problem = ["n_up", "n_down", "mass_up", "mass_down", "g"]
    bar = pd.to_numeric(rows["own_rel_error"], errors="coerce").fillna(np.inf)
    ordered = rows.assign(_reached=reached.astype(bool), _bar=bar).sort_values("_bar", kind="stable")
    # running AND from the most converged run up: a run is settled when nothing more converged on its problem missed
    settled = ordered.groupby(problem, sort=False)["_reached"].cummin()
    return settled.reindex(rows.index).astype(bool)


def _pick(good: pd.DataFrame, query: Query) -> tuple[pd.Series, str, str, str]:
    """The nearest qualifying neighbour (then the cheapest run there): (row, evidence, confidence, reason)."""
    good = good.assign(
        _same_masses=good["_distance"] <= SAME_RATIO,
        _exact=(good["_distance"] <= SAME_RATIO) & np.isclose(good["g"], query.g, rtol=1e-9, atol=1e-12),
        _stronger=good["g"].abs() >= abs(query.g) - 1e-12,
        _g_distance=(good["g"] - query.g).abs(),
    )
    order = good.sort_values(["_exact", "_same_masses", "_stronger", "_distance", "_g_distance", "cost_cpu_s"],
                             ascending=[False, False, False, True, True, True], kind="stable")
    pick = order.iloc[0]
    where = (f"{int(pick['n_up'])}+{int(pick['n_down'])}, masses {pick['mass_up']:.4g}/{pick['mass_down']:.4g},"
             f" g = {pick['g']:g}")
    error = f"relative error {pick['accuracy']:.2g} against a reference"
    if pick["_exact"]:
        return pick, "measured", "high", f"measured on this very problem: {error}"
    if pick["_same_masses"]:
        close = abs(pick["g"] - query.g) <= NEAR_G_ABSOLUTE + NEAR_G_RELATIVE * abs(query.g)
        confidence = "medium" if pick["_stronger"] or close else "low"
        side = ("at least as strong a coupling" if pick["_stronger"]
                else "a weaker coupling only (accuracy at fixed parameters usually worsens as |g| grows)")
        return pick, "nearby g", confidence, f"measured at {where} ({error}), {side}"
    return pick, "neighbouring masses", "low", (f"measured at a neighbouring mass ratio: {where} ({error}); the"
                                                 " parameters may not carry over exactly")


def advise(frame: pd.DataFrame, query: Query, references=None) -> Advice:
    """Rank the backends for ``query`` from a results frame or measurement table; see the module docstring."""
    from ..backends import registry

    if "accuracy" not in frame.columns:
        frame = attach_references(frame, references)
    ok = successful_ground_states(frame).reset_index(drop=True)
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
        near = neighbour_distance(query, rows["n_up"], rows["n_down"], rows["mass_up"], rows["mass_down"], rows["g"])
        near.index = rows.index
        neighbours = rows[near.notna()].assign(_distance=near[near.notna()])
        flag = _calibration_flag(neighbours)
        if flag is not None:
            rejected[backend] = flag
            continue
        status = judge_frame(rows, query.accuracy)
        reached = neighbours[status[neighbours.index] == REACHED]
        good = reached[_settled(rows, status == REACHED)[reached.index]]
        if good.empty:
            rejected[backend] = _why_not(rows, status, near, query) if reached.empty else (
                f"reached {query.accuracy:g} on neighbouring problems only in runs that a more converged run of its own on"
                " the same problem then missed: not converged there, so those parameters are not repeated")
            continue
        pick, evidence, confidence, reason = _pick(good, query)
        checked = error_bar_calibration(neighbours)["checked"].sum() if "error_bar" in neighbours else 0
        reasons = [reason, f"{len(good)} neighbouring run(s) reached {query.accuracy:g}; error bars"
                   + (f" held on all {int(checked)} reference-checked neighbouring results" if checked
                      else " never checked against a tight enough reference on this class")]
        conflict = dataset_conflict(query, backend)
        if conflict:
            reasons.append(conflict)
            confidence = "low"
        recommendations.append(Recommendation(
            backend=backend, params=pick["params_text"], evidence=evidence, confidence=confidence,
            cpu_s=_number(pick["cost_cpu_s"]), peak_mib=_number(pick["peak_mib"]), accuracy=float(pick["accuracy"]),
            reasons=reasons, param_values=_params_dict(pick.get("params")),
            measured_on={"n_up": int(pick["n_up"]), "n_down": int(pick["n_down"]), "mass_up": float(pick["mass_up"]),
                         "mass_down": float(pick["mass_down"]), "g": float(pick["g"]),
                         "reference_source": pick.get("ref_source"), "source": pick.get("measurement_source")},
        ))
    recommendations.sort(key=lambda r: (CONFIDENCE_RANK[r.confidence], math.inf if r.cpu_s is None else r.cpu_s))
    return Advice(query, recommendations, rejected)


def _number(value) -> float | None:
    return None if value is None or pd.isna(value) else float(value)


def dataset_sweeps() -> str:
    """The commands that rebuild the reference dataset from the built-in suites behind it."""
    from ..problems.dataset import SUITES

    return ", ".join(f"'trapbench sweep {suite}'" for suite in SUITES) + ", then 'trapbench dataset'"


def evidence_command(query: Query) -> str:
    """The sweep that would measure this problem: the built-in map suite when it holds a neighbour, else a suite to write."""
    if any(neighbour_distance(query, [n_up], [n_down], [m_up], [m_down], [g]).notna().iloc[0]
           for n_up, n_down, m_up, m_down, g in _map_points()):
        return "trapbench sweep map --store STORE"
    return (f"trapbench sweep SUITE.toml --store STORE   # SUITE.toml: this problem ({query.n_up}+{query.n_down},"
            f" mass_up = {query.mass_up:g}, mass_down = {query.mass_down:g}, g = {query.g:g}) with the backends and"
            " ladders of the built-in map suite for its particle number (problems/suites/map.toml)")


def _map_points() -> list[tuple[int, int, float, float, float]]:
    """(n_up, n_down, m_up, m_down, g) of every point of the built-in map suite (read as TOML, not validated)."""
    import tomllib

    resource = resources.files("trapbench.problems").joinpath("suites", "map.toml")
    if not resource.is_file():
        return []
    points = []
    for p in tomllib.loads(resource.read_text(encoding="utf-8")).get("problems", []):
        up, down, couplings = p.get("up", {}), p.get("down", {}), p.get("interaction", {}).get("g", [])
        for g in couplings if isinstance(couplings, list) else [couplings]:
            points.append((up.get("count", 0), down.get("count", 0), up.get("mass", 1.0), down.get("mass", 1.0), g))
    return points


# ----------------------------------------------------------------------------- the shipped table and stores


def graded_frame(frame: pd.DataFrame, tolerance=None) -> pd.DataFrame:
    """``tables.attach_references`` per backend, with references that never grade the method behind them.

    The references are ``references_for(problem, for_backend=backend)`` (exact values and the shipped reference
    dataset), and where those give no energy for a level, the reference-dataset agreement rule
    (``problems.dataset.judge_level``) applied to the results in ``frame`` itself: for N = 3 the three-body
    results, for N >= 4 two method families that agree. A backend is graded only by other families' values.
    """
    from ..problems import dataset
    from ..problems.references import Reference, is_calibrated_on, references_for

    best = dataset.level_runs(frame[frame["status"] == "ok"].to_dict("records"))

    def references(problem, backend):
        refs = references_for(problem, for_backend=backend)
        if is_calibrated_on(problem, backend):
            return refs
        known = {r.state for r in refs if r.quantity == "energy"}
        key = dataset.problem_key(problem)
        for state, candidates in sorted(best.get(key, {}).items()) if key else ():
            if state in known:
                continue
            graded = dataset.judge_level(state, problem.n_particles, candidates).reference_for(backend)
            if graded is not None:
                value, uncertainty, methods = graded
                refs.append(Reference("energy", state, value, uncertainty,
                                      f"results of {', '.join(methods)} in the same store (agreement rule of the"
                                      " reference dataset)", "computed", methods=methods, route="dataset"))
        return refs

    parts = [attach_references(rows, lambda p, b=backend: references(p, b), tolerance)
             for backend, rows in frame.groupby("backend", sort=False)]
    return pd.concat(parts).sort_index() if parts else attach_references(frame, None, tolerance)


def regraded_table(table: pd.DataFrame, suites=None) -> pd.DataFrame:
    """The rows of a method-map table graded again against today's references (``graded_frame``).

    The shipped table keeps each measurement (energy, error bar, cost) with the grade it had when it was built;
    when the reference dataset grows, the same measurements can be graded again without the stores they came
    from (``table_measurements``).
    """
    return measurement_table(graded_frame(table_measurements(table, suites)))


def table_measurements(table: pd.DataFrame, suites=None) -> pd.DataFrame:
    """The ungraded measurements behind a method-map table, as rows of a results frame.

    Each row's problem is found by name, species and coupling among the points of ``suites`` (default: every
    built-in suite, since the map is built from stores that also hold other suites' runs); a row that no suite
    describes raises ``ValueError``.
    """
    from .suite import builtin_suites, load_suite

    suites = suites if suites is not None else [load_suite(name) for name in builtin_suites()]
    points = {}
    for suite in suites:
        for named in suite.problems:
            for point in named.problem.points():
                up, down = point.species
                points.setdefault((named.name, up.count, down.count, up.mass, down.mass, float(point.coupling)), point)
    problems = []
    for row in table.itertuples(index=False):
        key = (row.problem_name, int(row.n_up), int(row.n_down), float(row.mass_up), float(row.mass_down), float(row.g))
        if key not in points:
            raise ValueError(f"method map row '{row.problem_name}' at g = {row.g}: no built-in suite has this problem;"
                             " rebuild the map from its stores with `trapbench map --store ...`")
        problems.append(points[key])
    measured = [c for c in TABLE_COLUMNS if c not in GRADE_COLUMNS]
    frame = table.reindex(columns=measured).reset_index(drop=True)
    frame["error_estimate"] = table["error_bar"].to_numpy()  # the bar as graded (energy_error, else an estimate)
    frame["problem"] = [p.to_dict() for p in problems]
    frame["problem_key"] = [p.key for p in problems]
    return frame


def updated_table(store_frame: pd.DataFrame, table: pd.DataFrame, suites=None) -> tuple[pd.DataFrame, list[str]]:
    """A method-map table with the results of ``store_frame`` in place of the rows of ``table`` they measure anew.

    A row of ``table`` is dropped where the stores hold the same task (backend, species, masses, g, parameters)
    or hold its backend at another version (a backend that changed leaves none of its old rows behind); every
    other row is kept as it was measured. The pool is graded again as a whole (``graded_frame``), so the dataset's
    agreement rule sees the kept and the new values together. So after one backend changed only its tasks need
    to run again, and a rerun of part of a backend's tasks keeps its other rows. Returns the table and the
    backends some of whose rows were kept.
    """
    versions = store_frame.groupby("backend")["backend_version"].agg(lambda v: set(map(str, v))).to_dict()
    measured = {_task_identity(row) for row in store_frame.itertuples(index=False)}
    keep = [not (row.backend in versions and str(row.backend_version) not in versions[row.backend])
            and _task_identity(row) not in measured for row in table.itertuples(index=False)]
    kept = table[keep].reset_index(drop=True)
    parts = [store_frame] + ([table_measurements(kept, suites)] if not kept.empty else [])
    pooled = pd.concat(parts, ignore_index=True)
    return measurement_table(graded_frame(pooled)), sorted(set(kept["backend"]))


def _task_identity(row) -> tuple:
    """What makes two results the same computation: backend, species, masses, g and parameters."""
    return (row.backend, int(row.n_up), int(row.n_down), float(row.mass_up), float(row.mass_down), float(row.g),
            json.dumps(_params_dict(row.params), sort_keys=True))


def measurement_table(frame: pd.DataFrame) -> pd.DataFrame:
    """The advice's view of a graded frame: successful ground states, the columns of TABLE_COLUMNS."""
    ok = frame[(frame["status"] == "ok") & (frame["state"] == 0)]
    table = ok.reindex(columns=list(TABLE_COLUMNS)).copy()
    table["params"] = [_params_dict(p) for p in table["params"]]
    return table.reset_index(drop=True)


def table_to_json(table: pd.DataFrame, sources: list[str]) -> dict:
    """The shipped file: version, the neighbour rule, the stores it came from, and the rows column by column."""
    import datetime as _dt

    def cell(value):
        if isinstance(value, dict):
            return value
        if value is None or (isinstance(value, float) and math.isnan(value)) or value is pd.NA:
            return None
        return value.item() if hasattr(value, "item") else value

    return {"name": "trapbench method map", "version": MAP_VERSION,
            "created": _dt.datetime.now(_dt.timezone.utc).strftime("%Y-%m-%dT%H:%M:%SZ"),
            "built_from": sources, "neighbour_rule": NEIGHBOUR_RULE,
            "units": {"energy": "hbar*omega", "mass": "m0 (the lighter species)", "g": "sqrt(hbar^3 omega/m0)",
                      "cpu": "CPU seconds of the solve", "memory": "peak resident bytes of the task"},
            "columns": list(TABLE_COLUMNS),
            "rows": [[cell(v) for v in row] for row in table[list(TABLE_COLUMNS)].itertuples(index=False)]}


def table_from_json(data: dict) -> pd.DataFrame:
    """The rows of a method-map file as a frame (columns of TABLE_COLUMNS, params as dicts)."""
    columns = data.get("columns", [])
    missing = [c for c in TABLE_COLUMNS if c not in columns]
    if missing:
        raise ValueError(f"method map: columns {', '.join(missing)} missing; rebuild it with `trapbench map`")
    frame = pd.DataFrame(data.get("rows", []), columns=columns)
    for column in frame.columns:
        if column not in ("backend", "backend_version", "problem_name", "params", "params_text", "status", "ref_source",
                          "error_basis"):
            frame[column] = pd.to_numeric(frame[column], errors="coerce")
    frame["state"] = frame["state"].astype(int)
    return frame


def shipped_table() -> pd.DataFrame:
    """The method map shipped with the package (empty when the file is absent), tagged with its source."""
    resource = resources.files("trapbench.problems").joinpath(*MAP_RESOURCE)
    if not resource.is_file():
        return pd.DataFrame(columns=[*TABLE_COLUMNS, "measurement_source"])
    data = json.loads(resource.read_text(encoding="utf-8"))
    return table_from_json(data).assign(measurement_source=f"shipped method map v{data.get('version', '?')}")


def measurements(store_frame: pd.DataFrame | None = None, store_name: str = "store", shipped: bool = True) -> pd.DataFrame:
    """The shipped table plus a user's results frame (graded here), one frame for ``advise``."""
    parts = [shipped_table()] if shipped else []
    if store_frame is not None and not store_frame.empty:
        parts.append(measurement_table(graded_frame(store_frame)).assign(measurement_source=store_name))
    parts = [p for p in parts if not p.empty]
    if not parts:
        return pd.DataFrame(columns=[*TABLE_COLUMNS, "measurement_source"])
    return pd.concat(parts, ignore_index=True)
