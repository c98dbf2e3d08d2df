"""Plots as SVG or PNG (matplotlib, no screen needed). Output is deterministic: fixed hash salt, no date."""

from __future__ import annotations

from pathlib import Path

import numpy as np

from archive.analysis import Analysis
from archive.analysis.segments import SegmentAnalysis
from archive.pooling.groups import GroupResult, PoolResult
from archive.records.files import write_replace
from archive.render.palette import PALETTE
from archive.stats import bayes


def _pyplot():  # type: ignore[no-untyped-def]
    import matplotlib

    matplotlib.use("Agg")
    matplotlib.rcParams["svg.hashsalt"] = "archive"
    matplotlib.rcParams["svg.fonttype"] = "none"
    import matplotlib.pyplot as plt

    return plt


def posterior_lift_plot(analysis: Analysis, path: Path, prior: tuple[float, float] = (1.0, 1.0)) -> Path:
    """Posterior density of each arm's relative lift in conversion against control; writes SVG or PNG."""
    plt = _pyplot()
    control = next(a for a in analysis.arms if a.control)
    post_c = bayes.BetaPosterior.from_counts(control.conversions, control.visitors, prior)
    fig, ax = plt.subplots(figsize=(7.5, 3.6), dpi=100)
    lows = [c.credible_lift_low for c in analysis.comparisons]
    highs = [c.credible_lift_high for c in analysis.comparisons]
    span = max(highs) - min(lows)
    grid = np.linspace(max(-0.99, min(lows) - 0.6 * span), max(highs) + 0.6 * span, 600)
    for i, c in enumerate(analysis.comparisons):
        arm = next(a for a in analysis.arms if a.name == c.arm)
        post = bayes.BetaPosterior.from_counts(arm.conversions, arm.visitors, prior)
        density = bayes.lift_density(post, post_c, grid)
        colour = PALETTE[i % len(PALETTE)]
        ax.plot(
            grid * 100,
            density / 100,
            color=colour,
            lw=1.8,
            label=f"{c.arm}: P(beats control) {c.prob_beat_control:.2f}",
        )
        inside = (grid >= c.credible_lift_low) & (grid <= c.credible_lift_high)
        ax.fill_between(grid[inside] * 100, density[inside] / 100, color=colour, alpha=0.15, lw=0)
    ax.axvline(0, color="#333333", lw=0.8, ls="--")
    ax.set_xlabel("relative lift in conversion against control (%)")
    ax.set_ylabel("posterior density")
    ax.set_title(f"{analysis.title}: where the true lift probably lies (shaded: 95% credible)", fontsize=9)
    ax.legend(frameon=False, fontsize=8)
    ax.spines[["top", "right"]].set_visible(False)
    fig.tight_layout()
    return save_figure(fig, path)


def save_figure(fig, path: Path) -> Path:  # type: ignore[no-untyped-def]
    import io

    plt = _pyplot()
    buffer = io.BytesIO()
    kind = path.suffix.lower().lstrip(".") or "svg"
    metadata = {"Date": None} if kind == "svg" else {"Software": None} if kind == "png" else None
    fig.savefig(buffer, format=kind, metadata=metadata)
    plt.close(fig)
    write_replace(path, buffer.getvalue())
    return path


def segment_forest_plot(segments: SegmentAnalysis, arm: str, path: Path) -> Path:
    """Forest plot of one arm's lift against control in each segment, with the mix-adjusted lift per dimension."""
    plt = _pyplot()
    labels: list[str] = []
    points: list[tuple[float, float, float, bool, bool]] = []  # lift, low, high, is_summary, small
    for d in segments.dimensions:
        for r in d.rows:
            if r.arm == arm and r.lift is not None and r.lift_low is not None and r.lift_high is not None:
                labels.append(f"{d.dimension}: {r.segment}" + (" (small)" if r.small else ""))
                points.append((r.lift, r.lift_low, r.lift_high, False, r.small))
        mix = next((m for m in d.mix_checks if m.arm == arm), None)
        if mix is not None and mix.adjusted_lift is not None and mix.adjusted_low is not None:
            labels.append(f"{d.dimension}: all (mix-adjusted)")
            points.append((mix.adjusted_lift, mix.adjusted_low, mix.adjusted_high or mix.adjusted_lift, True, False))
    fig, ax = plt.subplots(figsize=(7.5, 0.45 * len(points) + 1.4), dpi=100)
    for row, (lift, low, high, summary, small) in enumerate(points):
        y = len(points) - 1 - row
        colour = "#333333" if summary else ("#9a9a9a" if small else PALETTE[0])
        if summary:
            ax.fill([low * 100, lift * 100, high * 100, lift * 100], [y, y + 0.25, y, y - 0.25], color=colour)
        else:
            ax.plot([low * 100, high * 100], [y, y], color=colour, lw=1.6)
            ax.plot([lift * 100], [y], "s", color=colour, ms=6)
    ax.axvline(0, color="#333333", lw=0.8, ls="--")
    ax.set_yticks(range(len(points)), list(reversed(labels)), fontsize=8)
    ax.set_xlabel(f"relative lift of {arm} against control (%), 95% CI")
    ax.set_title(f"{segments.id}: {arm} by segment", fontsize=9)
    ax.spines[["top", "right"]].set_visible(False)
    fig.tight_layout()
    return save_figure(fig, path)


def group_forest_plot(group: GroupResult, path: Path, title: str = "") -> Path:
    """One group's tests with their 95% CIs, the pooled diamond and the prediction interval."""
    plt = _pyplot()
    rows = group.members
    fig, ax = plt.subplots(figsize=(7.5, 0.32 * len(rows) + 1.8), dpi=100)
    n = len(rows)
    for i, m in enumerate(rows):
        y = n + 1 - i
        ax.plot([m.low * 100, m.high * 100], [y, y], color=PALETTE[0], lw=1.2)
        ax.plot([m.lift * 100], [y], "s", color=PALETTE[0], ms=4)
        ax.plot([m.shrunk_lift * 100], [y], "o", mfc="none", mec=PALETTE[1], ms=5)
    low, mid, high = group.lift_low * 100, group.lift * 100, group.lift_high * 100
    ax.fill([low, mid, high, mid], [0, 0.3, 0, -0.3], color="#333333")
    if group.prediction_low is not None and group.prediction_high is not None:
        ax.plot([group.prediction_low * 100, group.prediction_high * 100], [-0.8, -0.8], color=PALETTE[1], lw=2.5)
    labels = [f"{m.record_id} · {m.arm}" for m in rows]
    ax.set_yticks([*range(n + 1, 1, -1), 0, -0.8], [*labels, "pooled (95% CI)", "next test (95% PI)"], fontsize=7)
    ax.axvline(0, color="#333333", lw=0.8, ls="--")
    ax.set_xlabel("relative lift in conversion (%): squares observed, circles shrunk toward the group")
    ax.set_title(title or f"{group.key}: {group.comparisons} comparisons", fontsize=9)
    ax.spines[["top", "right"]].set_visible(False)
    fig.tight_layout()
    return save_figure(fig, path)


def funnel_plot(result: PoolResult, path: Path) -> Path:
    """Each comparison's log lift against its standard error, with the 95% funnel around the pooled effect."""
    plt = _pyplot()
    seen: set[tuple[str, str]] = set()
    xs, ses = [], []
    for g in result.groups:
        for m in g.members:
            if (m.record_id, m.arm) in seen:
                continue
            seen.add((m.record_id, m.arm))
            xs.append(np.log1p(m.lift))
            ses.append((np.log1p(m.high) - np.log1p(m.low)) / (2 * 1.959963984540054))
    x, se = np.array(xs), np.array(ses)
    centre = float(np.sum(x / se**2) / np.sum(1 / se**2)) if len(x) else 0.0
    fig, ax = plt.subplots(figsize=(6.5, 4.2), dpi=100)
    ax.scatter(x * 100, se, s=14, color=PALETTE[0], alpha=0.8)
    top = float(se.max()) * 1.05 if len(se) else 1.0
    grid = np.linspace(0, top, 50)
    ax.plot((centre - 1.96 * grid) * 100, grid, color="#777777", lw=0.8)
    ax.plot((centre + 1.96 * grid) * 100, grid, color="#777777", lw=0.8)
    ax.axvline(centre * 100, color="#333333", lw=0.8, ls="--")
    ax.invert_yaxis()
    ax.set_xlabel("log lift in conversion (x100)")
    ax.set_ylabel("standard error (larger tests at the top)")
    title = "funnel: a lopsided cloud hints at selective filing"
    if result.egger is not None:
        title += f" (Egger p {result.egger.p_value:.2g})"
    ax.set_title(title, fontsize=9)
    ax.spines[["top", "right"]].set_visible(False)
    fig.tight_layout()
    return save_figure(fig, path)
