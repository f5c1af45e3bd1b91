"""Plots (PNG or SVG; matplotlib optional): learning curves of one verdict, performance profiles of a suite.

:func:`plot_curves`: both sets of learning curves; the band at each checkpoint is
the two-sided t confidence interval of the mean evaluation return across seeds
(Student 1908): seeds are the independent samples.
:func:`plot_profiles`: the performance profiles of a suite's candidate and
baseline (share of runs above each normalised score; Agarwal et al. 2021) with
their pointwise stratified bootstrap bands.
matplotlib is an optional extra; without it both raise
:class:`PlotUnavailableError` saying how to install it.
"""

from __future__ import annotations

import os
from pathlib import Path

import numpy as np
from scipy import stats as _st

from harness.core.atomic import atomic_path
from harness.core.errors import HarnessError
from harness.gate.curveset import CurveSet
from harness.gate.suite_aggregate import SuiteAggregate

__all__ = ["INSTALL_HINT", "PlotUnavailableError", "curve_band", "plot_curves", "plot_profiles"]

INSTALL_HINT = "pip install 'rl-harness[plot]'  (or: pip install matplotlib)"
_FORMATS = (".png", ".svg")


class PlotUnavailableError(HarnessError, RuntimeError):
    """matplotlib is not installed; the message says how to install it."""


def curve_band(matrix: np.ndarray, *, confidence_level: float = 0.95) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Mean and t confidence band across seeds for a ``(n_seeds, n_checkpoints)`` matrix.

    With one seed the band collapses onto the mean.

    Examples
    --------
    >>> mean, low, high = curve_band(np.array([[0.0, 1.0], [2.0, 3.0]]))
    >>> mean.tolist(), bool(np.all(low <= mean) and np.all(mean <= high))
    ([1.0, 2.0], True)
    """
    matrix = np.asarray(matrix, dtype=np.float64)
    n = matrix.shape[0]
    mean = matrix.mean(axis=0)
    if n < 2:
        return mean, mean.copy(), mean.copy()
    half = _st.t.ppf(0.5 + confidence_level / 2.0, n - 1) * matrix.std(axis=0, ddof=1) / np.sqrt(n)
    return mean, mean - half, mean + half


def plot_curves(baseline: CurveSet | None, candidate: CurveSet, path: str | os.PathLike, *,
                title: str | None = None) -> Path:
    """Plot the mean curves with 95% bands and write them to ``path`` (``.png`` or ``.svg``), atomically.

    Raises
    ------
    ValueError
        If ``path`` does not end in ``.png`` or ``.svg``.
    PlotUnavailableError
        If matplotlib is not installed.
    """
    fig = _figure(path, (7.0, 4.2))
    ax = fig.add_subplot()
    sides = [("baseline", baseline, "tab:blue", "-"), ("candidate", candidate, "tab:orange", "--")]
    for name, curves, colour, style in sides:
        if curves is None:
            continue
        steps = np.asarray(curves.steps)
        mean, low, high = curve_band(curves.curve_matrix())
        ax.plot(steps, mean, color=colour, linestyle=style, label=f"{name} (n={len(curves.runs)} seeds)")
        ax.fill_between(steps, low, high, color=colour, alpha=0.25, linewidth=0)
    ax.set_xlabel("environment steps")
    ax.set_ylabel("mean evaluation return")
    ax.set_title(title or candidate.manifest)
    ax.legend(loc="best", title="mean and 95% interval")
    ax.grid(alpha=0.3)
    return _save(fig, path)


def _figure(path: str | os.PathLike, size: tuple[float, float]):
    """A matplotlib Figure (no pyplot state), after checking the path's format and that matplotlib is there."""
    if Path(path).suffix.lower() not in _FORMATS:
        raise ValueError(f"`path` must end in .png or .svg, got {str(path)!r}")
    try:
        import matplotlib

        matplotlib.use("Agg", force=False)
        from matplotlib.figure import Figure
    except ImportError:
        raise PlotUnavailableError(f"plotting needs matplotlib, which is not installed: {INSTALL_HINT}") from None
    return Figure(figsize=size, layout="constrained")


def _save(fig, path: str | os.PathLike) -> Path:
    path = Path(path)
    path.parent.mkdir(parents=True, exist_ok=True)
    with atomic_path(path) as tmp:
        fig.savefig(tmp, format=path.suffix[1:].lower(),
                    metadata={"Date": None} if path.suffix.lower() == ".svg" else None)
    return path


def plot_profiles(aggregate: SuiteAggregate, path: str | os.PathLike, *, title: str | None = None) -> Path:
    """Plot the candidate's and the baseline's performance profiles with their bands to ``path``, atomically.

    Raises
    ------
    ValueError
        If ``path`` does not end in ``.png`` or ``.svg``.
    PlotUnavailableError
        If matplotlib is not installed.
    """
    fig = _figure(path, (7.0, 4.4))
    ax = fig.add_subplot()
    sides = [("baseline", aggregate.baseline_profile, "tab:blue", "-"),
             ("candidate", aggregate.candidate_profile, "tab:orange", "--")]
    for name, profile, colour, style in sides:
        runs = sum(len(getattr(t, name)) for t in aggregate.tasks)
        taus = np.asarray(profile.thresholds)
        ax.plot(taus, profile.share, color=colour, linestyle=style, drawstyle="steps-post",
                label=f"{name} ({runs} runs)")
        ax.fill_between(taus, profile.low, profile.high, color=colour, alpha=0.2, linewidth=0, step="post")
    for x, text in ((0.0, "random policy"), (1.0, "threshold")):
        ax.axvline(x, color="grey", linewidth=0.8, linestyle=":")
        ax.annotate(text, (x, 0.5), xytext=(-3, 0), textcoords="offset points", color="grey", fontsize=8,
                    rotation=90, ha="right", va="center")
    ax.set_ylim(-0.02, 1.02)
    ax.set_xlabel("normalised final return (0 = random policy, 1 = threshold)")
    ax.set_ylabel("share of runs scoring above")
    level = aggregate.candidate_profile.confidence_level
    ax.set_title(title or f"performance profile over {len(aggregate.tasks)} tasks: "
                 + ", ".join(t.manifest for t in aggregate.tasks), fontsize=10, wrap=True)
    ax.legend(loc="lower left", title=f"{level:.0%} stratified bootstrap band")
    ax.grid(alpha=0.3)
    return _save(fig, path)
