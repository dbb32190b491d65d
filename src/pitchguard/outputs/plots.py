"""matplotlib pictures: the aerial image of a probe, NILS/CD/EL/DOF through pitch."""

from __future__ import annotations

import math
from pathlib import Path

import numpy as np

from pitchguard.deck import LayerRule
from pitchguard.errors import OutputError
from pitchguard.judge.gratings import GratingResult, bands
from pitchguard.outputs.files import atomic_write
from pitchguard.outputs.user_text import figure_text, shown_path
from pitchguard.outputs.verdict import CAUTION

SHADE = {"fail": "#d62728", "risk": "#ff7f0e", "marginal": "#bcbd22"}


FORMATS = (".png", ".svg")


def _figure_module():
    import matplotlib

    matplotlib.use("Agg")
    import matplotlib.pyplot as plt

    return plt


def _save(fig, out: Path, inputs: list[Path]) -> None:
    if out.suffix.lower() not in FORMATS:
        raise OutputError(f"{shown_path(out)}: plot file must end in .png or .svg")

    def w(tmp: Path) -> None:
        fig.savefig(str(tmp), dpi=110, bbox_inches="tight", format=out.suffix.lower()[1:])

    try:
        atomic_write(out, w, inputs)
    finally:
        _figure_module().close(fig)


def plot_image(rule: LayerRule, r: GratingResult, out: Path, inputs: list[Path]) -> None:
    """Aerial image over one period, the threshold, and the drawn and printed edges."""
    plt = _figure_module()
    fig, ax = plt.subplots(figsize=(7.5, 4.2))
    ax.plot(r.x_nm, r.intensity, color="#1f77b4", lw=2, label="aerial image")
    h = r.cd_nm / 2
    feature = "line" if rule.field == "clear" else "opening"
    ax.axvspan(-h, h, color="#999999", alpha=0.25, label=f"drawn {feature} ({r.cd_nm:g} nm)")
    m = r.metrics
    if m is not None and math.isfinite(m.threshold):
        ax.axhline(
            m.threshold, color="#d62728", ls="--", lw=1.2, label=f"threshold {m.threshold:.3f}"
        )
        if not (m.lost or m.bridged) and math.isfinite(m.cd_nm):
            for s in (-1, 1):
                ax.axvline(s * m.cd_nm / 2, color="#2ca02c", ls=":", lw=1.5)
            ax.plot(
                [], [], color="#2ca02c", ls=":", label=f"printed CD {m.cd_nm:.1f} nm (symmetric)"
            )
    ax.set_xlabel("x (nm, wafer; 0 = centre of the drawn feature)")
    ax.set_ylabel("intensity (open frame = 1)")
    ax.set_xlim(r.x_nm[0], r.x_nm[-1])
    ax.set_ylim(0, max(1.05, float(np.max(r.intensity)) * 1.05))
    title = (
        f"{figure_text(rule.name)}: pitch {r.pitch_nm:g} nm, CD {r.cd_nm:g} nm, "
        f"focus {r.focus_nm:g} nm "
        f"- {r.severity}"
    )
    ax.set_title(title, fontsize=10)
    ax.legend(fontsize=8, loc="upper right")
    fig.text(0.01, -0.02, CAUTION, fontsize=6.5, color="#555555", wrap=True)
    _save(fig, out, inputs)


def plot_array(rule: LayerRule, r, out: Path, inputs: list[Path]) -> None:
    """The 2-D aerial image of an array probe (3 x 3 unit cells), the printed
    contour at the nominal threshold over the drawn rectangles."""
    from matplotlib.patches import Rectangle

    plt = _figure_module()
    fig, ax = plt.subplots(figsize=(6.4, 5.6))
    px, py = r.pitch_nm
    nx, ny = len(r.x_nm), len(r.y_nm)
    image = np.tile(r.intensity, (3, 3))
    x = np.concatenate([r.x_nm - px, r.x_nm, r.x_nm + px])
    y = np.concatenate([r.y_nm - py, r.y_nm, r.y_nm + py])
    assert image.shape == (3 * ny, 3 * nx)
    mesh = ax.pcolormesh(x, y, image, shading="nearest", cmap="magma")
    fig.colorbar(mesh, ax=ax, label="intensity (open frame = 1)")
    m = r.metrics
    if m is not None and math.isfinite(m.threshold):
        ax.contour(x, y, image, levels=[m.threshold], colors="#2ca02c", linewidths=1.5)
        ax.plot([], [], color="#2ca02c", label=f"printed (threshold {m.threshold:.3f})")
    w, h = r.cd_nm
    for i in (-1, 0, 1):
        for j in (-1, 0, 1):
            ax.add_patch(
                Rectangle(
                    (i * px - w / 2, j * py - h / 2), w, h, fill=False, ec="#cccccc", ls="--", lw=1
                )
            )
    ax.plot([], [], color="#cccccc", ls="--", label="drawn")
    ax.set_aspect("equal")
    ax.set_xlabel("x (nm, wafer)")
    ax.set_ylabel("y (nm, wafer)")
    feature = "posts" if rule.field == "clear" else "holes"
    ax.set_title(
        f"{figure_text(rule.name)}: {w:g} x {h:g} nm {feature} at {px:g} x {py:g} nm, focus "
        f"{r.focus_nm:g} nm - {r.severity}",
        fontsize=10,
    )
    ax.legend(fontsize=8, loc="upper right")
    fig.text(0.01, -0.02, CAUTION, fontsize=6.5, color="#555555", wrap=True)
    _save(fig, out, inputs)


def plot_sweep(
    rule: LayerRule, results: list[GratingResult], out: Path, inputs: list[Path]
) -> None:
    """NILS, CD error, exposure latitude and depth of focus against pitch, failing bands shaded."""
    plt = _figure_module()
    p = np.array([r.pitch_nm for r in results])

    def series(attr):
        return np.array(
            [getattr(r.metrics, attr) if r.metrics else np.nan for r in results], dtype=float
        )

    panels = [
        (
            "NILS",
            series("nils"),
            [(rule.nils_risk_below, "risk"), (rule.nils_marginal_below, "marginal")],
        ),
        (
            "CD error at nominal dose (%)",
            series("cd_error_pct"),
            [(rule.cd_tolerance_pct, "tolerance"), (-rule.cd_tolerance_pct, None)],
        ),
        ("exposure latitude (%)", series("el_pct"), [(rule.el_min_pct, "minimum")]),
        ("depth of focus (nm)", series("dof_nm"), [(rule.dof_min_nm, "minimum")]),
    ]
    fig, axes = plt.subplots(len(panels), 1, figsize=(8, 9), sharex=True)
    shaded = bands(results)
    step = float(np.median(np.diff(p))) if len(p) > 1 else 1.0
    cutoff = results[0].orders.cutoff_pitch_nm if results else float("nan")
    for ax, (label, y, limits) in zip(axes, panels, strict=True):
        for a, b, sev in shaded:
            ax.axvspan(a - step / 2, b + step / 2, color=SHADE[sev], alpha=0.18, lw=0)
        if math.isfinite(cutoff) and p[0] <= cutoff <= p[-1]:
            ax.axvline(cutoff, color="#b00000", lw=1.0, ls=":")
        ax.plot(p, y, color="#1f77b4", lw=1.6, marker=".", ms=3)
        for value, name in limits:
            ax.axhline(value, color="#555555", ls="--", lw=0.9)
            if name:
                ax.text(
                    p[-1], value, f" {name}", fontsize=7, va="bottom", ha="right", color="#555555"
                )
        ax.set_ylabel(label, fontsize=8)
        if np.all(np.isnan(y)):
            ax.text(
                0.5,
                0.5,
                "not judged (no dose anchor in the deck)" if "CD" in label else "not imaged",
                transform=ax.transAxes,
                ha="center",
                fontsize=8,
            )
    for a, b, sev in shaded:  # each band wide enough for it named on the top panel
        if b - a < 0.06 * (p[-1] - p[0]):
            continue
        axes[0].text(
            0.5 * (a + b),
            1.0,
            sev,
            transform=axes[0].get_xaxis_transform(),
            ha="center",
            va="top",
            fontsize=7,
            color=SHADE[sev],
        )
    if math.isfinite(cutoff) and p[0] <= cutoff <= p[-1]:
        axes[-1].text(
            cutoff,
            0.02,
            f" cutoff {cutoff:.1f} nm",
            transform=axes[-1].get_xaxis_transform(),
            fontsize=7,
            color="#b00000",
        )
    axes[-1].set_xlabel("pitch (nm, wafer)")
    cd = results[0].cd_nm if results else float("nan")
    axes[0].set_title(
        f"{figure_text(rule.name)} through pitch at CD {cd:g} nm "
        f"({figure_text(rule.exposure_name)}); shaded: "
        "fail (red), risk (orange), marginal (olive)",
        fontsize=9,
    )
    fig.text(0.01, 0.0, CAUTION, fontsize=6.5, color="#555555", wrap=True)
    fig.tight_layout()
    _save(fig, out, inputs)
