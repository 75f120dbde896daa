"""The physics figures of the report, each built from stored results only.

Every function takes the results frame with reference columns (``tables.attach_references(
store.results_frame())``) and, where arrays are needed, the open ``Store``; it returns a
``FigureOutcome``: a matplotlib Figure with a caption and the table of the numbers drawn, or a
"no data" message naming the sweep that provides them. Data are found by their physics (particle
numbers, masses, requested levels and observables), not by problem names, so the problems of
``problems/suites/figures.toml`` feed these figures from whichever suite ran them.

Where several results exist for the same single-g problem, the one with the smallest relative error
(against a reference, else the backend's own error bar; ``tables.attach_references``) is drawn, ties
going to the costlier (more converged) run. Units: hbar = omega = m0 = 1; energies in hbar omega,
lengths in sqrt(hbar/(m0 omega)), momenta in sqrt(hbar m0 omega), g in sqrt(hbar^3 omega/m0).
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np
import pandas as pd

ENERGY_LABEL = r"energy $E$ [$\hbar\omega$]"
G_LABEL = r"coupling $g$ [$\sqrt{\hbar^3\omega/m_0}$]"
X_LABEL = r"position $x$ [$\sqrt{\hbar/(m_0\omega)}$]"
DENSITY_LABEL = r"density $n_s(x)$ [$1/\sqrt{\hbar/(m_0\omega)}$]"
P_UP_LABEL = r"$p_\uparrow$ [$\sqrt{\hbar m_0\omega}$]"
P_DOWN_LABEL = r"$p_\downarrow$ [$\sqrt{\hbar m_0\omega}$]"
FIGURES_SWEEP = "trapbench sweep figures"
SPECTRUM_MIN_STATES = 6
SPECTRUM_MIN_POINTS = 3
SPECTRUM_MAX_BAR = 0.5  # hbar omega: a level known no better than this is listed in the caption, not drawn
MAP_MIN_GRID = 41
NOISE_MIN_POINTS = 3
NOISE_SLOPE_MAX_G = 0.5
RATIO_DIGITS = 6


@dataclass
class FigureOutcome:
    """One figure of the report: the drawing, its caption and the numbers behind it, or why it is missing."""

    key: str
    title: str
    caption: str = ""
    figure: object | None = None
    table: pd.DataFrame | None = None
    missing: str | None = None


def _missing(key: str, title: str, what: str) -> FigureOutcome:
    return FigureOutcome(key, title, missing=f"No data for this figure ({what}): run `{FIGURES_SWEEP}` first"
                         " (or a suite holding the problems of problems/suites/figures.toml), then the report again.")


def mass_ratio(row) -> float:
    return round(float(row["mass_up"]) / float(row["mass_down"]), RATIO_DIGITS)


def ratio_text(ratio: float) -> str:
    """m_up/m_down for people: '1', '2', '6.667 (40/6)'."""
    for num, den in ((40, 6), (6, 40)):
        if math.isclose(ratio, num / den, rel_tol=1e-6):
            return f"{ratio:.4g} ({num}/{den})"
    return f"{ratio:.4g}"


def _targets(row) -> dict:
    problem = row["problem"] if isinstance(row["problem"], dict) else {}
    return problem.get("targets", {})


def best_tasks(frame: pd.DataFrame) -> pd.DataFrame:
    """One ground-state row per single-g problem: the most accurate successful task (ties: the costliest)."""
    ok = frame[(frame["status"] == "ok") & (frame["state"] == 0)].copy()
    if ok.empty:
        return ok
    ok["_accuracy"] = pd.to_numeric(ok["accuracy"], errors="coerce").fillna(np.inf)
    ok["_cost"] = pd.to_numeric(ok["solve_cpu_s"], errors="coerce").fillna(0.0)
    ok = ok.sort_values(["_accuracy", "_cost"], ascending=[True, False], kind="stable")
    return ok.drop_duplicates("problem_key").drop(columns=["_accuracy", "_cost"])


def _levels(frame: pd.DataFrame, task_key: str) -> pd.DataFrame:
    rows = frame[(frame["task_key"] == task_key) & (frame["state"] >= 0)]
    return rows.sort_values("state")


def _backends_text(rows: pd.DataFrame) -> str:
    used = rows.drop_duplicates(["backend", "params_text"])
    return "; ".join(f"{r.backend} ({r.params_text or 'default parameters'})" for r in used.itertuples())


def _figure(width: float, height: float, columns: int, **kwargs):
    from matplotlib.figure import Figure

    figure = Figure(figsize=(width, height), layout="constrained")
    return figure, np.atleast_1d(figure.subplots(1, columns, **kwargs))


# ----------------------------------------------------------------------------- spectra


def spectra_figure(frame: pd.DataFrame, store) -> FigureOutcome:
    """Levels against g for equal masses and for m_up/m_down = 40/6 (or 6/40), the same particle numbers.

    Levels are joined across g within each parity sector, in order of energy (levels of one sector
    do not cross unless another symmetry separates them; those of opposite parity may).
    """
    key, title = "spectra", "Spectra against g: equal masses and mass ratio 40/6"
    best = best_tasks(frame)
    if best.empty:
        return _missing(key, title, "several levels of one configuration over a range of g")
    best = best[[int(_targets(r).get("states", 1)) >= SPECTRUM_MIN_STATES and _targets(r).get("parity", "any") == "any"
                 for r in best.to_dict("records")]]
    best = best.assign(ratio=[mass_ratio(r) for r in best.to_dict("records")])
    candidates = []
    for (n_up, n_down), group in best.groupby(["n_up", "n_down"]):
        equal = group[np.isclose(group["ratio"], 1.0)]
        imbalanced = group[np.isclose(group["ratio"], 40 / 6) | np.isclose(group["ratio"], 6 / 40)]
        if equal["g"].nunique() >= SPECTRUM_MIN_POINTS and imbalanced["g"].nunique() >= SPECTRUM_MIN_POINTS:
            candidates.append((min(equal["g"].nunique(), imbalanced["g"].nunique()), int(n_up), int(n_down), equal, imbalanced))
    if not candidates:
        return _missing(key, title, f"at least {SPECTRUM_MIN_STATES} levels at {SPECTRUM_MIN_POINTS} or more g, for equal"
                        " masses and for 40/6, same particle numbers")
    _, n_up, n_down, equal, imbalanced = max(candidates, key=lambda c: (c[0], c[1] + c[2]))
    n = n_up + n_down
    figure, axes = _figure(11, 5.0, 2, sharey=True)
    table_rows, max_bar, used, hidden = [], 0.0, [], []
    styles = {1: ("tab:blue", "-", "o", "even parity"), -1: ("tab:red", "--", "s", "odd parity"),
              0: ("0.2", "-", "o", "parity not reported")}
    for ax, group in zip(axes, (equal, imbalanced)):
        ratio = float(group["ratio"].iloc[0])
        lines: dict[tuple[int, int], list] = {}
        for task in group.sort_values("g").itertuples():
            rows = _levels(frame, task.task_key)
            used.append(rows.iloc[:1])
            states = store.result(task.task_key).states
            seen: dict[int, int] = {}
            for r in rows.itertuples():
                labels = states[int(r.state)] if int(r.state) < len(states) else {}
                parity = int(labels.get("parity") or 0)
                index = seen.get(parity, 0)
                seen[parity] = index + 1
                bar = r.energy_error if not _none(r.energy_error) else task.error_estimate
                if not _none(bar) and float(bar) > SPECTRUM_MAX_BAR:
                    hidden.append(f"level {int(r.state)} at g = {task.g:g} (m_up/m_down = {ratio_text(ratio)}):"
                                  f" {float(r.energy):.6g} +- {float(bar):.2g}")
                else:
                    lines.setdefault((parity, index), []).append(
                        (float(task.g), float(r.energy), 0.0 if _none(bar) else float(bar)))
                    if not _none(bar):
                        max_bar = max(max_bar, float(bar))
                table_rows.append({"mass ratio": ratio_text(ratio), "g": float(task.g), "state": int(r.state),
                                   "parity": parity or None, "energy": float(r.energy), "error bar": bar,
                                   "backend": task.backend})
        # a sector's k-th level is joined only where every g holds it (the topmost levels may fall outside the
        # requested states at some g); the others are drawn as markers alone
        points_per_g = group["g"].nunique()
        labelled = set()
        for (parity, _), points in sorted(lines.items()):
            color, dash, marker, label = styles[parity]
            gs, es, bars = zip(*points)
            ax.errorbar(gs, es, yerr=bars, ls=dash if len(points) == points_per_g else "none", marker=marker, ms=3,
                        lw=1.1, capsize=2, color=color, label=None if parity in labelled else label)
            labelled.add(parity)
        ax.axhline(n * n / 2, color="0.4", ls=":", lw=1, label=f"$N^2/2$ = {n * n / 2:g}")
        ax.set_xlabel(G_LABEL)
        ax.set_title(f"{n_up}+{n_down}, " + ("equal masses" if math.isclose(ratio, 1.0) else
                                             f"$m_\\uparrow/m_\\downarrow$ = {ratio_text(ratio)}"))
        ax.grid(True, alpha=0.3)
        ax.legend(fontsize="small", loc="lower right")
    axes[0].set_ylabel(ENERGY_LABEL)
    levels = int(max(frame.loc[frame["task_key"].isin(pd.concat(used)["task_key"]), "state"]) + 1)
    caption = (f"The {levels} lowest levels of {n_up}+{n_down} fermions against g (total energies, centre of mass"
               " included), equal masses (left) and mass ratio m_up/m_down = "
               f"{ratio_text(float(imbalanced['ratio'].iloc[0]))} (right; m0 = the lighter mass), joined across g"
               " within each parity sector in order of energy. Horizontal lines are levels that do not depend on g"
               " (for equal masses the spatially antisymmetric states, whose wave function vanishes at every"
               f" contact). The dotted line is N^2/2 = {n * n / 2:g}, where the C(N, N_up)-fold fermionized manifold"
               " of equal masses converges as g -> infinity; with unequal masses that manifold is split into groups"
               " with different limits. Error bars: the backend's own (largest among the drawn points: "
               f"{max_bar:.2g} hbar omega). Computed with " + _backends_text(pd.concat(used)) + "."
               + (f" Not drawn, error bar above {SPECTRUM_MAX_BAR:g} hbar omega: " + "; ".join(hidden) + "." if hidden else ""))
    long = pd.DataFrame(table_rows)
    table = long.pivot_table(index=["mass ratio", "g"], columns="state", values="energy", sort=False)
    table.columns = [f"E{state}" for state in table.columns]
    table["largest error bar"] = pd.to_numeric(long["error bar"], errors="coerce").groupby(
        [long["mass ratio"], long["g"]], sort=False).max()
    table["parities"] = long.groupby(["mass ratio", "g"], sort=False)["parity"].agg(
        lambda p: " ".join("+" if v == 1 else "-" if v == -1 else "?" for v in p))
    return FigureOutcome(key, title, caption, figure, table.reset_index())


def _cycle(count: int) -> list:
    from matplotlib import colormaps

    cmap = colormaps["viridis"]
    return [cmap(i / max(count - 1, 1) * 0.9) for i in range(count)]


# ----------------------------------------------------------------------------- densities


def densities_figure(frame: pd.DataFrame, store) -> FigureOutcome:
    """Lowest-state densities of the heavy and the light species at several g (unequal masses)."""
    key, title = "densities", "Heavy and light densities in the lowest state"
    best = best_tasks(frame)
    best = best[[("density" in _targets(r).get("observables", [])) and not math.isclose(mass_ratio(r), 1.0)
                 for r in best.to_dict("records")]] if not best.empty else best
    if best.empty:
        return _missing(key, title, "lowest-state densities with unequal masses")
    groups = sorted(best.groupby(["n_up", "n_down", "mass_up", "mass_down"]), key=lambda item: -item[1]["g"].nunique())
    (n_up, n_down, mass_up, mass_down), group = groups[0]
    group = group.sort_values("g").iloc[:4]
    figure, axes = _figure(3.6 * len(group) + 0.6, 3.8, len(group), sharey=True)
    rows = []
    heavy_is_up = mass_up > mass_down
    for ax, task in zip(axes, group.itertuples()):
        result = store.result(task.task_key)
        for species, count, mass in (("up", n_up, mass_up), ("down", n_down, mass_down)):
            density = result.observables[f"density_{species}"]
            x, n = density.axes["x"], density.values
            heavy = (species == "up") == heavy_is_up
            label = f"{'heavy' if heavy else 'light'} ({species}, m = {mass:.4g})"
            ax.plot(x, n, color="tab:red" if heavy else "tab:blue", lw=1.6, label=label)
            norm = float(np.trapezoid(n, x))
            rows.append({"g": float(task.g), "species": label, "integral n dx": norm,
                         "⟨x^2⟩": float(np.trapezoid(x * x * n, x) / norm), "n(0)": float(np.interp(0.0, x, n)),
                         "backend": task.backend})
        ax.set_title(f"g = {task.g:g}")
        ax.set_xlabel(X_LABEL)
        ax.grid(True, alpha=0.3)
    axes[0].set_ylabel(DENSITY_LABEL)
    axes[0].set_ylim(0.0, 1.3 * axes[0].get_ylim()[1])  # headroom for the legend above the curves
    axes[0].legend(fontsize="small", loc="upper left")
    caption = (f"One-body densities n_up(x) and n_down(x) of the lowest state of {int(n_up)}+{int(n_down)} fermions with"
               f" m_up/m_down = {ratio_text(mass_up / mass_down)} (each integrates to its particle number), at"
               f" g = {', '.join(f'{g:g}' for g in group['g'])}. With growing repulsion the light species is pushed"
               " out of the centre, where the heavy one sits: the table gives ⟨x^2⟩ and n(0) per species."
               " Computed with " + _backends_text(group) + ".")
    return FigureOutcome(key, title, caption, figure, pd.DataFrame(rows))


# ----------------------------------------------------------------------------- noise maps


def noise_maps_figure(frame: pd.DataFrame, store) -> FigureOutcome:
    """C(p_up, p_down) at attractive g, one panel per mass ratio."""
    key, title = "noise_maps", "Momentum noise correlations at attractive g"
    best = best_tasks(frame)
    if not best.empty:
        best = best[[("noise" in _targets(r).get("observables", [])) and int(_targets(r).get("grid_points", 0)) >= MAP_MIN_GRID
                     and r["g"] < 0 for r in best.to_dict("records")]]
    if best.empty:
        return _missing(key, title, f"the 'noise' observable on a grid of >= {MAP_MIN_GRID} points at g < 0")
    best = best.assign(ratio=[mass_ratio(r) for r in best.to_dict("records")])
    # one configuration and one g: the ones with the most mass ratios
    groups = sorted(best.groupby(["n_up", "n_down", "g"]), key=lambda item: (-item[1]["ratio"].nunique(), item[0][2]))
    (n_up, n_down, g), group = groups[0]
    group = group.sort_values("ratio").drop_duplicates("ratio").iloc[:4]
    figure, axes = _figure(4.2 * len(group) + 0.8, 4.2, len(group))
    rows = []
    for ax, task in zip(axes, group.itertuples()):
        noise = store.result(task.task_key).observables["noise"]
        p_up, p_down = noise.axes["p_up"], noise.axes["p_down"]
        values = np.asarray(noise.values, dtype=float)
        scale = float(np.max(np.abs(values))) or 1.0
        image = ax.pcolormesh(p_down, p_up, values, cmap="RdBu_r", vmin=-scale, vmax=scale, shading="nearest")
        ax.set_aspect("equal")
        ax.set_xlabel(P_DOWN_LABEL)
        ax.set_ylabel(P_UP_LABEL)
        ax.set_title(f"$m_\\uparrow/m_\\downarrow$ = {ratio_text(task.ratio)}")
        figure.colorbar(image, ax=ax, shrink=0.8, label=r"$C(p_\uparrow,p_\downarrow)$ [$1/(\hbar m_0\omega)$]")
        d_up, d_down = p_up[1] - p_up[0], p_down[1] - p_down[0]
        rows.append({"mass ratio": ratio_text(task.ratio), "g": float(g), "max C": float(values.max()),
                     "min C": float(values.min()), "sum C dp dp": float(values.sum() * d_up * d_down),
                     "noise_integral (exact)": _scalar(frame, task.task_key, "noise_integral"), "backend": task.backend})
    caption = (f"Noise correlation C(p_up, p_down) = ⟨n_up(p_up) n_down(p_down)⟩ - n_up(p_up) n_down(p_down) of the"
               f" lowest state of {int(n_up)}+{int(n_down)} fermions at g = {g:g}, for m_up/m_down = "
               + ", ".join(ratio_text(r) for r in group["ratio"]) + ". Red: momenta found together more often than"
               " independently. For equal masses the positive ridge along p_up = -p_down shows pairs of zero total"
               " momentum; a heavier up species spreads the correlations along p_up. C integrates to zero (column 'sum C dp dp' of the table, on the plotted grid)."
               " Computed with " + _backends_text(group) + ".")
    return FigureOutcome(key, title, caption, figure, pd.DataFrame(rows))


def _scalar(frame: pd.DataFrame, task_key: str, name: str):
    column = f"scalar.{name}"
    if column not in frame:
        return None
    values = frame.loc[(frame["task_key"] == task_key) & (frame["state"] == 0), column]
    return None if values.empty or pd.isna(values.iloc[0]) else float(values.iloc[0])


# ----------------------------------------------------------------------------- integrated noise


def noise_slope(g: np.ndarray, integral: np.ndarray) -> tuple[float, float, int] | None:
    """Slope s = lim_{g -> 0} sqrt(I(g)) / |g| of the integrated noise I = int C^2 dp dp.

    C is linear in g at first order (it vanishes for the non-interacting product state), so
    I = s^2 g^2 + b g^3 + O(g^4); s^2 and b come from a least-squares line through I/g^2 against g
    over the points with 0 < |g| <= NOISE_SLOPE_MAX_G. Returns (s, its standard error, points used),
    or None with fewer than two points.
    """
    keep = (np.abs(g) > 0) & (np.abs(g) <= NOISE_SLOPE_MAX_G)
    if keep.sum() < 2:
        return None
    x, y = g[keep], integral[keep] / g[keep] ** 2
    design = np.column_stack([np.ones_like(x), x])
    coef, *_ = np.linalg.lstsq(design, y, rcond=None)
    a = max(float(coef[0]), 0.0)
    dof = len(x) - 2
    if dof > 0:
        residual = y - design @ coef
        cov = np.linalg.inv(design.T @ design) * float(residual @ residual) / dof
        sigma_a = math.sqrt(max(cov[0, 0], 0.0))
    else:
        sigma_a = float("nan")
    s = math.sqrt(a)
    return s, (sigma_a / (2 * s) if s > 0 else float("nan")), int(keep.sum())


def noise_integral_figure(frame: pd.DataFrame) -> FigureOutcome:
    """sqrt(int C^2) against g for each mass ratio, and its slope at g = 0 against the mass ratio."""
    key, title = "noise_integral", "Integrated noise correlation against g"
    column = "scalar.noise_integral"
    best = best_tasks(frame)
    if best.empty or column not in best or best[column].notna().sum() == 0:
        return _missing(key, title, "the scalar noise_integral (observable 'noise') over several g")
    best = best[best[column].notna()].copy()
    best["ratio"] = [mass_ratio(r) for r in best.to_dict("records")]
    # the same (ratio, g) may come from several problems (e.g. a fine noise map and a coarse scan): keep one
    best = best.drop_duplicates(["n_up", "n_down", "ratio", "g"])
    counts = best.groupby(["n_up", "n_down", "ratio"])["g"].nunique()
    scans = counts[counts >= NOISE_MIN_POINTS].reset_index()
    if scans.empty:
        return _missing(key, title, f"the scalar noise_integral at {NOISE_MIN_POINTS} or more g for one mass ratio")
    (n_up, n_down), chosen = max(scans.groupby(["n_up", "n_down"]), key=lambda item: len(item[1]))
    group = best[(best["n_up"] == n_up) & (best["n_down"] == n_down) & best["ratio"].isin(chosen["ratio"])]
    figure, (left, right) = _figure(11, 4.4, 2)
    rows, slopes = [], []
    ratios = sorted(group["ratio"].unique())
    colors = _cycle(len(ratios))
    for color, ratio in zip(colors, ratios):
        part = group[group["ratio"] == ratio].sort_values("g")
        g, integral = part["g"].to_numpy(float), part[column].to_numpy(float)
        left.plot(g, np.sqrt(np.maximum(integral, 0.0)), "o-", ms=4, color=color,
                  label=f"$m_\\uparrow/m_\\downarrow$ = {ratio_text(ratio)}")
        fit = noise_slope(g, integral)
        for gi, ii in zip(g, integral):
            rows.append({"mass ratio": ratio_text(ratio), "g": float(gi), "noise_integral": float(ii),
                         "sqrt(noise_integral)": math.sqrt(max(ii, 0.0))})
        if fit is not None:
            slopes.append((ratio, *fit))
    left.set_xlabel(G_LABEL)
    left.set_ylabel(r"$\sqrt{I}$, $I = \int C^2\,dp_\uparrow dp_\downarrow$ [$1/\sqrt{\hbar m_0\omega}$]")
    left.legend(fontsize="small")
    left.grid(True, alpha=0.3)
    if slopes:
        r, s, ds, _ = map(np.array, zip(*slopes))
        right.errorbar(r, s, yerr=np.nan_to_num(ds), fmt="o-", capsize=3)
        right.set_xscale("log")
        right.set_xticks(r, [f"{v:.4g}" for v in r])
        right.minorticks_off()
    right.set_xlabel(r"mass ratio $m_\uparrow/m_\downarrow$")
    right.set_ylabel(r"slope $s = \lim_{g\to 0}\sqrt{I}\,/\,|g|$ [$1/(\hbar^2\omega)$]")
    right.grid(True, which="both", alpha=0.3)
    slope_table = pd.DataFrame([{"mass ratio": ratio_text(r_), "slope": s_, "slope error": d_, "points": n_}
                                for r_, s_, d_, n_ in slopes])
    caption = (f"Left: the integrated noise measure I(g) = integral of C(p_up, p_down)^2 over both momenta (scalar"
               f" noise_integral), as sqrt(I), for {int(n_up)}+{int(n_down)} fermions and mass ratios "
               + ", ".join(ratio_text(r) for r in ratios) + ". C vanishes at g = 0 and grows linearly in g, so sqrt(I)"
               " has a kink of slope s at g = 0. Right: s against the mass ratio, from a least-squares fit of"
               f" I/g^2 = s^2 + b g over 0 < |g| <= {NOISE_SLOPE_MAX_G:g} (error bar: the fit's standard error,"
               " absent with two points). Computed with " + _backends_text(group) + ".")
    table = pd.concat([slope_table, pd.DataFrame(rows)], ignore_index=True) if not slope_table.empty else pd.DataFrame(rows)
    return FigureOutcome(key, title, caption, figure, table)


# ----------------------------------------------------------------------------- odd-even


def ground_energies(frame: pd.DataFrame) -> dict[tuple[int, int, float], tuple[float, float, str]]:
    """(N_up, N_down, g) -> (ground energy, error bar, backend) for equal masses and frequencies.

    N_up and N_down are ordered (larger first): with equal masses the species are interchangeable.
    A configuration with an empty species does not feel g and is entered at g = None.
    """
    best = best_tasks(frame)
    out = {}
    for r in best.to_dict("records"):
        problem = r["problem"] if isinstance(r["problem"], dict) else {}
        up, down = problem.get("up", {}), problem.get("down", {})
        if not (math.isclose(r["mass_up"], r["mass_down"]) and up.get("omega", 1.0) == down.get("omega", 1.0)):
            continue
        if _targets(r).get("parity", "any") != "any" or problem.get("trap", {}).get("shape", "harmonic") != "harmonic":
            continue
        n_up, n_down = sorted((int(r["n_up"]), int(r["n_down"])), reverse=True)
        bar = r["energy_error"] if not _none(r["energy_error"]) else r["error_estimate"]
        key = (n_up, n_down, None if n_down == 0 else float(r["g"]))
        candidate = (float(r["energy"]), None if _none(bar) else float(bar), r["backend"])
        if key not in out or _rank(candidate) < _rank(out[key]):
            out[key] = candidate
    return out


def _none(value) -> bool:
    return value is None or (isinstance(value, float) and math.isnan(value))


def _rank(entry) -> float:
    return math.inf if entry[1] is None else entry[1]


def odd_even_table(frame: pd.DataFrame) -> pd.DataFrame:
    """Odd-even staggering Delta(N+1) = E(N+1) - [E(N) + E(N+2)]/2 (N even) from the best stored ground energies.

    The definition and its error propagation are ``bench.pairing.pairing_gaps`` (three-point formula,
    common practice; N_up = ceil(N/2), N_down = floor(N/2), E(0) = 0). Delta vanishes at g = 0 for
    every N and is positive when pairing lowers the even systems.
    """
    from .pairing import balanced_counts, pairing_gaps

    energies = ground_energies(frame)
    couplings = sorted({k[2] for k in energies if k[2] is not None})
    rows = []
    for g in couplings:
        for n in range(0, max(k[0] + k[1] for k in energies) + 1):
            n_up, n_down = balanced_counts(n)
            entry = (0.0, 0.0, "E(0) = 0") if n == 0 else energies.get((n_up, n_down, None if n_down == 0 else g))
            if entry is not None:
                rows.append({"backend": "best stored", "N": n, "g": g, "energy": entry[0],
                             "error": math.nan if entry[1] is None else entry[1], "status": "ok", "source": entry[2]})
    if not rows:
        return pd.DataFrame(columns=["N", "g", "E(N-1)", "E(N)", "E(N+1)", "Delta", "error bar", "backends"])
    stored = pd.DataFrame(rows)
    gaps = pairing_gaps(stored)
    by = stored.set_index(["N", "g"])
    table = []
    for gap in gaps.itertuples():
        n, g = int(gap.N), gap.g
        sources = [by.loc[(m, g), "source"] for m in (n - 1, n, n + 1)]
        table.append({"N": n, "g": g, "E(N-1)": by.loc[(n - 1, g), "energy"], "E(N)": by.loc[(n, g), "energy"],
                      "E(N+1)": by.loc[(n + 1, g), "energy"], "Delta": gap.gap,
                      "error bar": None if math.isnan(gap.error) else gap.error,
                      "backends": ", ".join(dict.fromkeys(sources))})
    return pd.DataFrame(table, columns=["N", "g", "E(N-1)", "E(N)", "E(N+1)", "Delta", "error bar", "backends"])


def odd_even_figure(frame: pd.DataFrame) -> FigureOutcome:
    key, title = "odd_even", "Odd-even energy differences"
    table = odd_even_table(frame)
    if table.empty:
        return _missing(key, title, "ground energies of N-1, N and N+1 particles (N odd, spins balanced) at equal masses"
                        " and the same g")
    figure, axes = _figure(7.5, 4.6, 1)
    ax = axes[0]
    for n, part in table.groupby("N"):
        part = part.sort_values("g")
        bars = pd.to_numeric(part["error bar"], errors="coerce").fillna(0.0)
        n_up, n_down = (n + 1) // 2, n // 2
        ax.errorbar(part["g"], part["Delta"], yerr=bars, fmt="o-", ms=4, capsize=3,
                    label=f"N = {n} ({n_up}+{n_down})")
    ax.axhline(0.0, color="0.4", lw=0.8)
    ax.set_xlabel(G_LABEL)
    ax.set_ylabel(r"$\Delta(N) = E(N) - [E(N-1) + E(N+1)]/2$ [$\hbar\omega$]")
    ax.legend(fontsize="small")
    ax.grid(True, alpha=0.3)
    caption = ("Odd-even staggering of the ground-state energy at odd N, Delta(N) = E(N) - [E(N-1) + E(N+1)]/2"
               " (three-point formula, common practice; spins as balanced as possible, equal masses, E(0) = 0)."
               " Delta vanishes at g = 0 and grows with attraction, where the odd particle is left unpaired. Error"
               " bars: the energies' own error bars (linear sum; none drawn where a backend gives none). The backend"
               " of each energy is in the table.")
    return FigureOutcome(key, title, caption, figure, table)


def physics_figures(frame: pd.DataFrame, store) -> list[FigureOutcome]:
    """All physics figures in report order."""
    return [
        spectra_figure(frame, store),
        densities_figure(frame, store),
        noise_maps_figure(frame, store),
        noise_integral_figure(frame),
        odd_even_figure(frame),
    ]
