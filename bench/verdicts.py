"""When a result counts as reaching an accuracy, and how well its error bars cover the truth.

One rule, used wherever results are judged (agreement and accuracy-vs-cost tables, method map,
``advise``, the report, ``validate``):

- A result's error is **measured** only against a reference whose uncertainty u_ref is at most
  1/REFERENCE_MARGIN = 1/10 of the threshold t being judged. Then its error bound
  |E - ref| + u_ref decides: ``reached`` when it is <= t, ``missed`` otherwise.
- Otherwise the result is **unverified**: it is shown with its own error bar beside it and never
  counts as reaching t, whatever that error bar claims. A loose reference can still prove a miss:
  when |E - ref| - u_ref > t the true error exceeds t for any true value inside the reference's
  bar, and the verdict is ``missed``.
- Neither a reference nor an error bar: ``no measure``.

All four numbers are in one unit: absolute energies (hbar omega), or all divided by |ref| for
relative errors. The margin of ten is common practice for calibration standards (a reference an
order of magnitude better than the tolerance tested), no source.

Error-bar calibration (``error_bar_calibration``): per backend and particle number, the share of
results with |E - ref| <= COVERAGE_SIGMAS x error bar (2 sigma) and the median of error bar /
|E - ref|, counted only where the reference decides that comparison (u_ref <= 2 sigma / 10). A
backend whose share is below COVERAGE_TARGET (95 %) is flagged: its error bars are too narrow.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np
import pandas as pd

REFERENCE_MARGIN = 10.0
COVERAGE_SIGMAS = 2.0
COVERAGE_TARGET = 0.95

REACHED, MISSED, UNVERIFIED, NO_MEASURE = "reached", "missed", "unverified", "no measure"


@dataclass(frozen=True)
class Verdict:
    """The outcome of judging one result against one threshold (see the module docstring).

    ``error`` is the measured error bound |E - ref| + u_ref where a reference exists, ``own_error``
    the backend's own error bar, both in the unit of ``threshold``.
    """

    status: str
    threshold: float
    error: float | None = None
    own_error: float | None = None

    @property
    def reached(self) -> bool:
        return self.status == REACHED

    def text(self) -> str:
        """e.g. 'reached (3.1e-07)', 'unverified (own error bar 2e-06)', 'missed (0.011)'."""
        if self.status in (REACHED, MISSED):
            return f"{self.status} ({self.error:.2g})"
        if self.status == UNVERIFIED:
            return "unverified (" + ("no error bar" if self.own_error is None else f"own error bar {self.own_error:.2g}") + ")"
        return NO_MEASURE


def _number(value) -> float | None:
    if value is None:
        return None
    value = float(value)
    return None if math.isnan(value) else value


def reference_decides(reference_uncertainty: float, threshold: float) -> bool:
    """True when a reference of this uncertainty may grade ``threshold`` (u_ref <= threshold / 10)."""
    return reference_uncertainty * REFERENCE_MARGIN <= threshold


def judge(deviation: float | None, reference_uncertainty: float | None, own_error: float | None,
          threshold: float) -> Verdict:
    """The verdict on one result: ``deviation`` = |E - ref| (None without a reference).

    ``reference_uncertainty`` must be given with a deviation (0 only for a reference known to the
    last bit); ``own_error`` is the backend's error bar (None when it gives none).
    """
    if not threshold > 0:
        raise ValueError(f"threshold: got {threshold!r}; give a positive error to judge against")
    deviation, own_error = _number(deviation), _number(own_error)
    uncertainty = _number(reference_uncertainty)
    if deviation is not None and uncertainty is None:
        raise ValueError("reference_uncertainty: missing for a result with a reference; give the reference's"
                         " uncertainty (0 for an exact value)")
    if deviation is not None:
        bound = abs(deviation) + uncertainty
        if reference_decides(uncertainty, threshold):
            return Verdict(REACHED if bound <= threshold else MISSED, threshold, bound, own_error)
        if abs(deviation) - uncertainty > threshold:
            return Verdict(MISSED, threshold, bound, own_error)
        return Verdict(UNVERIFIED, threshold, bound, own_error)
    if own_error is not None:
        return Verdict(UNVERIFIED, threshold, None, own_error)
    return Verdict(NO_MEASURE, threshold)


def judge_frame(frame: pd.DataFrame, threshold: float, deviation: str = "rel_error",
                reference_uncertainty: str = "ref_rel_uncertainty", own_error: str = "own_rel_error") -> pd.Series:
    """``judge`` on every row of ``frame`` at once: a Series of statuses (reached/missed/unverified/no measure).

    The column names default to the relative columns of ``tables.attach_references``; pass
    ``abs_error``, ``ref_effective_uncertainty`` and ``error_bar`` to judge absolute thresholds.
    """
    if not threshold > 0:
        raise ValueError(f"threshold: got {threshold!r}; give a positive error to judge against")

    def numbers(column: str) -> np.ndarray:
        return pd.to_numeric(frame[column], errors="coerce").to_numpy(dtype=float)

    dev, unc, own = np.abs(numbers(deviation)), numbers(reference_uncertainty), numbers(own_error)
    has_reference = ~np.isnan(dev) & ~np.isnan(unc)
    with np.errstate(invalid="ignore"):  # NaN rows compare False, which is what they mean
        decides = has_reference & (unc * REFERENCE_MARGIN <= threshold)
        within = dev + unc <= threshold
        provably_missed = has_reference & (dev - unc > threshold)
    status = np.where(~np.isnan(own) | has_reference, UNVERIFIED, NO_MEASURE).astype(object)
    status[provably_missed] = MISSED
    status[decides & within] = REACHED
    status[decides & ~within] = MISSED
    return pd.Series(status, index=frame.index, dtype=object)


CALIBRATION_COLUMNS = ["backend", "N", "with error bar", "checked", "too loose a reference", "within 2 sigma",
                       "coverage at 2 sigma", "median bar/abs(E - ref)", "flag"]


def error_bar_calibration(frame: pd.DataFrame) -> pd.DataFrame:
    """Per backend and particle number N: how often |E - ref| <= 2 error bars, and the median bar / |E - ref|.

    ``frame`` needs the columns backend, n_up, n_down, error_bar, abs_error and
    ref_effective_uncertainty (``tables.attach_references`` adds the last three); rows without an
    error bar or a reference are ignored. "checked" counts the results whose reference decides
    the 2-sigma comparison; "flag" says when their coverage is below 95 %.
    """
    bar = pd.to_numeric(frame["error_bar"], errors="coerce")
    deviation = pd.to_numeric(frame["abs_error"], errors="coerce").abs()
    uncertainty = pd.to_numeric(frame["ref_effective_uncertainty"], errors="coerce")
    usable = bar.notna() & (bar > 0)
    data = pd.DataFrame({"backend": frame["backend"], "N": frame["n_up"] + frame["n_down"], "bar": bar,
                         "deviation": deviation, "with_reference": deviation.notna() & uncertainty.notna(),
                         "decides": deviation.notna() & (uncertainty * REFERENCE_MARGIN <= COVERAGE_SIGMAS * bar)})[usable]
    rows = []
    for (backend, n), group in data.groupby(["backend", "N"], sort=True):
        checked = group[group["decides"]]
        within = int((checked["deviation"] <= COVERAGE_SIGMAS * checked["bar"]).sum())
        coverage = within / len(checked) if len(checked) else None
        ratio = checked["bar"] / checked["deviation"]  # a deviation of exactly 0 gives inf: the bar is ample
        rows.append({"backend": backend, "N": int(n), "with error bar": len(group), "checked": len(checked),
                     "too loose a reference": int((group["with_reference"] & ~group["decides"]).sum()),
                     "within 2 sigma": within, "coverage at 2 sigma": coverage,
                     "median bar/abs(E - ref)": float(np.median(ratio)) if len(checked) else None,
                     "flag": "below 95 %" if coverage is not None and coverage < COVERAGE_TARGET else ""})
    return pd.DataFrame(rows, columns=CALIBRATION_COLUMNS)


def poorly_calibrated(calibration: pd.DataFrame) -> dict[tuple[str, int], str]:
    """(backend, N) -> 'k/M = x %' for the flagged rows of an ``error_bar_calibration`` table."""
    flagged = calibration[calibration["flag"] != ""]
    return {(r["backend"], int(r["N"])): f"{r['within 2 sigma']}/{r['checked']} = {100 * r['coverage at 2 sigma']:.0f} %"
            for r in flagged.to_dict("records")}
