"""Momentum noise correlations: the maps C(p_up, p_down) at attractive g, and the integrated noise against g.

C(p_up, p_down) = <n_up(p_up) n_down(p_down)> - n_up(p_up) n_down(p_down). The maps are read from
the store (``Store.result``); the integral I = int C^2 dp dp is the scalar ``noise_integral`` of
the frame, and its slope at g = 0 comes from ``slope_at_zero``.
"""

from __future__ import annotations

import math

import numpy as np
import pandas as pd

from ....backends.extrapolation import fit_line
from . import (G_LABEL, P_DOWN_LABEL, P_UP_LABEL, FigureOutcome, backends_text, best_tasks, colors, mass_ratio, missing,
               new_figure, ratio_text, requested)

MAPS_KEY, MAPS_TITLE = "noise_maps", "Momentum noise correlations at attractive g"
INTEGRAL_KEY, INTEGRAL_TITLE = "noise_integral", "Integrated noise correlation against g"
MAP_MIN_GRID = 41
MAX_MAPS = 4
MIN_POINTS = 3
SLOPE_MAX_G = 0.5
MAX_TICKED_RATIOS = 5
INTEGRAL_COLUMN = "scalar.noise_integral"


# ----------------------------------------------------------------------------- maps


def select_maps(frame: pd.DataFrame) -> pd.DataFrame:
    """Tasks with a fine noise map at g < 0: the configuration and g with the most mass ratios (one task each)."""
    best = best_tasks(frame)
    if best.empty:
        return best
    best = best[[("noise" in requested(r).get("observables", [])) and int(requested(r).get("grid_points", 0)) >= MAP_MIN_GRID
                 and r["g"] < 0 for r in best.to_dict("records")]]
    if best.empty:
        return best
    best = best.assign(ratio=[mass_ratio(r) for r in best.to_dict("records")])
    groups = sorted(best.groupby(["n_up", "n_down", "g"]), key=lambda item: (-item[1]["ratio"].nunique(), item[0][2]))
    return groups[0][1].sort_values("ratio").drop_duplicates("ratio").iloc[:MAX_MAPS]


def _scalar(frame: pd.DataFrame, task_key: str, name: str):
    column = f"scalar.{name}"
    if column not in frame:
        return None
    values = frame.loc[(frame["task_key"] == task_key) & (frame["state"] == 0), column]
    return None if values.empty or pd.isna(values.iloc[0]) else float(values.iloc[0])


def draw_maps(tasks: pd.DataFrame, frame: pd.DataFrame, store):
    """The maps side by side, and the table of their extremes and integrals."""
    figure, axes = new_figure(4.2 * len(tasks) + 0.8, 4.2, len(tasks))
    rows = []
    for ax, task in zip(axes, tasks.itertuples()):
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
        rows.append({"mass ratio": ratio_text(task.ratio), "g": float(task.g), "max C": float(values.max()),
                     "min C": float(values.min()), "sum C dp dp": float(values.sum() * d_up * d_down),
                     "noise_integral (exact)": _scalar(frame, task.task_key, "noise_integral"), "backend": task.backend})
    return figure, pd.DataFrame(rows)


def caption_maps(tasks: pd.DataFrame) -> str:
    first = tasks.iloc[0]
    return (f"Noise correlation C(p_up, p_down) = ⟨n_up(p_up) n_down(p_down)⟩ - n_up(p_up) n_down(p_down) of the lowest"
            f" state of {int(first['n_up'])}+{int(first['n_down'])} fermions at g = {first['g']:g}, for m_up/m_down = "
            + ", ".join(ratio_text(r) for r in tasks["ratio"]) + ". Red: momenta found together more often than"
            " independently. For equal masses the positive ridge along p_up = -p_down shows pairs of zero total"
            " momentum; a heavier up species spreads the correlations along p_up. C integrates to zero (column"
            " 'sum C dp dp' of the table, on the plotted grid). Computed with " + backends_text(tasks) + ".")


def build_maps(frame: pd.DataFrame, store) -> FigureOutcome:
    tasks = select_maps(frame)
    if tasks.empty:
        return missing(MAPS_KEY, MAPS_TITLE, f"the 'noise' observable on a grid of >= {MAP_MIN_GRID} points at g < 0")
    figure, numbers = draw_maps(tasks, frame, store)
    return FigureOutcome(MAPS_KEY, MAPS_TITLE, caption_maps(tasks), figure, numbers)


# ----------------------------------------------------------------------------- integrated noise


def slope_at_zero(g: np.ndarray, integral: np.ndarray) -> tuple[float, float, int] | None:
    """Slope s = lim_{g -> 0} sqrt(I(g)) / |g| of the integrated noise I = int C^2 dp dp.

    C is linear in g at first order (it vanishes for the non-interacting product state), so
    I = s^2 g^2 + b g^3 + O(g^4); s^2 and b come from a least-squares line through I/g^2 against g
    (``extrapolation.fit_line``) over the points with 0 < |g| <= SLOPE_MAX_G. Returns (s, its
    standard error, points used), the error NaN with exactly two points, or None with fewer.
    """
    keep = (np.abs(g) > 0) & (np.abs(g) <= SLOPE_MAX_G)
    if keep.sum() < 2:
        return None
    fit = fit_line(g[keep], integral[keep] / g[keep] ** 2)
    s = math.sqrt(max(fit.intercept, 0.0))
    return s, (fit.intercept_error / (2 * s) if s > 0 else math.nan), int(keep.sum())


def select_integral(frame: pd.DataFrame) -> pd.DataFrame:
    """The noise_integral scans (one task per mass ratio and g) of the configuration with the most mass ratios."""
    best = best_tasks(frame)
    if best.empty or INTEGRAL_COLUMN not in best or best[INTEGRAL_COLUMN].notna().sum() == 0:
        return best.iloc[0:0]
    best = best[best[INTEGRAL_COLUMN].notna()].copy()
    best["ratio"] = [mass_ratio(r) for r in best.to_dict("records")]
    # the same (ratio, g) may come from several problems (e.g. a fine noise map and a coarse scan): keep one
    best = best.drop_duplicates(["n_up", "n_down", "ratio", "g"])
    counts = best.groupby(["n_up", "n_down", "ratio"])["g"].nunique()
    scans = counts[counts >= MIN_POINTS].reset_index()
    if scans.empty:
        return best.iloc[0:0]
    (n_up, n_down), chosen = max(scans.groupby(["n_up", "n_down"]), key=lambda item: len(item[1]))
    return best[(best["n_up"] == n_up) & (best["n_down"] == n_down) & best["ratio"].isin(chosen["ratio"])]


def draw_integral(scans: pd.DataFrame):
    """sqrt(I) against g per mass ratio (left) and the slope at g = 0 against the mass ratio (right), with the numbers."""
    figure, (left, right) = new_figure(11, 4.4, 2)
    rows, slopes = [], []
    ratios = sorted(scans["ratio"].unique())
    for color, ratio in zip(colors(len(ratios)), ratios):
        part = scans[scans["ratio"] == ratio].sort_values("g")
        g, integral = part["g"].to_numpy(float), part[INTEGRAL_COLUMN].to_numpy(float)
        left.plot(g, np.sqrt(np.maximum(integral, 0.0)), "o-", ms=4, color=color,
                  label=f"$m_\\uparrow/m_\\downarrow$ = {ratio_text(ratio)}")
        for gi, ii in zip(g, integral):
            rows.append({"mass ratio": ratio_text(ratio), "g": float(gi), "noise_integral": float(ii),
                         "sqrt(noise_integral)": math.sqrt(max(ii, 0.0))})
        fit = slope_at_zero(g, integral)
        if fit is not None:
            slopes.append((ratio, *fit))
    left.set_xlabel(G_LABEL)
    left.set_ylabel(r"$\sqrt{I}$, $I = \int C^2\,dp_\uparrow dp_\downarrow$ [$1/\sqrt{\hbar m_0\omega}$]")
    left.legend(fontsize="small")
    left.grid(True, alpha=0.3)
    if slopes:
        r, s, ds, _ = map(np.array, zip(*slopes))
        right.errorbar(r, s, yerr=np.nan_to_num(ds), fmt="o-", ms=4, capsize=3)
        right.set_xscale("log")
        if len(r) <= MAX_TICKED_RATIOS:  # few ratios: tick each; a long scan keeps the log axis's own ticks
            right.set_xticks(r, [f"{v:.4g}" for v in r])
            right.minorticks_off()
    right.set_xlabel(r"mass ratio $m_\uparrow/m_\downarrow$")
    right.set_ylabel(r"slope $s = \lim_{g\to 0}\sqrt{I}\,/\,|g|$ [$1/(\hbar^2\omega)$]")
    right.grid(True, which="both", alpha=0.3)
    slope_table = pd.DataFrame([{"mass ratio": ratio_text(r_), "slope": s_, "slope error": d_, "points": n_}
                                for r_, s_, d_, n_ in slopes])
    numbers = pd.concat([slope_table, pd.DataFrame(rows)], ignore_index=True) if slopes else pd.DataFrame(rows)
    return figure, numbers


def caption_integral(scans: pd.DataFrame) -> str:
    first = scans.iloc[0]
    return (f"Left: the integrated noise measure I(g) = integral of C(p_up, p_down)^2 over both momenta (scalar"
            f" noise_integral), as sqrt(I), for {int(first['n_up'])}+{int(first['n_down'])} fermions and mass ratios "
            + ", ".join(ratio_text(r) for r in sorted(scans["ratio"].unique())) + ". C vanishes at g = 0 and grows"
            " linearly in g, so sqrt(I) has a kink of slope s at g = 0. Right: s against the mass ratio, from a"
            f" least-squares fit of I/g^2 = s^2 + b g over 0 < |g| <= {SLOPE_MAX_G:g} (error bar: the fit's standard"
            " error, absent with two points). Computed with " + backends_text(scans) + ".")


def build_integral(frame: pd.DataFrame) -> FigureOutcome:
    scans = select_integral(frame)
    if scans.empty:
        return missing(INTEGRAL_KEY, INTEGRAL_TITLE, f"the scalar noise_integral at {MIN_POINTS} or more g for one mass"
                       " ratio (observable 'noise')")
    figure, numbers = draw_integral(scans)
    return FigureOutcome(INTEGRAL_KEY, INTEGRAL_TITLE, caption_integral(scans), figure, numbers)
