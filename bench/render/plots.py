"""Per-scenario time-series plots (matplotlib, Agg back end), saved as ``plots.png`` beside ``result.json``.

Panels: trunk height error, roll and pitch, velocity tracking, yaw-rate
tracking and vertical foot forces against the carried weight, then one panel
per signal the controller logged (``signal_*`` in trace.npz). Criterion limits
are drawn as dashed lines, timed events are shaded and labelled, the unscored
start is greyed and the first violation is marked, so that the picture says why
the verdict is what it is.
"""

from __future__ import annotations

import math
from pathlib import Path

from bench.fileio import atomic_target


PLOTS_FILE = "plots.png"
#: Points per line at most; longer traces are thinned by a stride (plots only).
MAX_POINTS = 4000
#: MuJoCo's default gravity, m/s^2 (mjModel.opt.gravity = (0, 0, -9.81)).
GRAVITY = 9.81
STATUS_COLOURS = {"passed": "#1f9d48", "failed": "#d62d20", "error": "#e69a00", "timeout": "#e69a00"}
EVENT_COLOURS = {"push": "#e74c3c", "steady_force": "#e74c3c", "attach": "#f39c12", "drop": "#f39c12",
                 "drain": "#f39c12", "mass_step": "#f39c12"}
FOOT_COLOURS = ("#1f77b4", "#ff7f0e", "#2ca02c", "#9467bd")
SIGNAL_COLOURS = ("#1f77b4", "#ff7f0e", "#2ca02c", "#d62728", "#9467bd", "#8c564b", "#e377c2", "#7f7f7f")


#: Controller signals drawn, one panel each (the rest are named under the last panel).
MAX_SIGNAL_PANELS = 4
#: Height of one signal panel, inches.
SIGNAL_PANEL_IN = 1.8


def _criteria(result: dict) -> dict[str, dict]:
    from bench.report.record import RecordError, RunRecord

    try:
        return {c.name: c.to_json() for c in RunRecord.from_json(result).criteria}
    except RecordError:   # a partial file is still drawn, with what it has
        return {c["name"]: c for c in result.get("criteria") or [] if isinstance(c, dict) and "name" in c}


def _limit(crit: dict, name: str) -> float | None:
    c = crit.get(name)
    return None if c is None or c.get("limit") is None else float(c["limit"])


def plot_trace(trace, result: dict, path: str | Path, score_from: float | None = None, dpi: int = 80,
               foot_names: list[str] | None = None) -> Path:
    """Draw the panels for ``trace`` and ``result`` and save them as PNG at ``path``."""
    import matplotlib

    matplotlib.use("Agg", force=False)
    from matplotlib.figure import Figure

    from bench.scoring.metrics import error_series

    from bench.sim.signals import PREFIX, signal_names

    A = trace.arrays
    n = len(trace)
    path = Path(path)
    signals = signal_names(A)
    shown = signals[:MAX_SIGNAL_PANELS]   # the controller's own signals, one panel each, after the five
    height_in = 11 + SIGNAL_PANEL_IN * len(shown)
    fig = Figure(figsize=(10, height_in), dpi=dpi)
    # Fixed margins (in inches, so that extra panels do not squeeze them): a layout engine would cost
    # more than all the drawing.
    fig.subplots_adjust(left=0.1, right=0.985, top=1 - 0.715 / height_in, bottom=0.55 / height_in, hspace=0.1)
    axes = fig.subplots(5 + len(shown), 1, sharex=True)
    status = str(result.get("status", "?"))
    title = f"{result.get('scenario', '?')}  \u2014  {result.get('controller', '?')}  \u2014  {status.upper()}"
    reason = result.get("reason")
    fig.suptitle(title + (f"\n{reason}" if reason else ""), color=STATUS_COLOURS.get(status, "black"),
                 fontsize=11, ha="center")
    if n == 0:
        axes[0].text(0.5, 0.5, "no trace recorded", transform=axes[0].transAxes, ha="center")
        fig.savefig(path)
        return path

    stride = max(1, math.ceil(n / MAX_POINTS))
    s = slice(None, None, stride)
    t = A["t"][s]
    ser = error_series(trace)
    crit = _criteria(result)

    def limits(ax, lim, scale=1.0, both=True, label=None):
        if lim is None:
            return
        ax.axhline(lim * scale, color="#d62d20", ls="--", lw=1, label=label)
        if both:
            ax.axhline(-lim * scale, color="#d62d20", ls="--", lw=1)

    ax = axes[0]
    ax.plot(t, ser["height_error"][s] * 1000, color="#1f77b4", lw=1.2, label="height error")
    limits(ax, _limit(crit, "height_error_max"), 1000, label="limit (max)")
    limits(ax, _limit(crit, "height_error_rms"), 1000, label=None)
    ax.set_ylabel("height error\n[mm]")

    ax = axes[1]
    ax.plot(t, ser["roll_error_deg"][s], color="#1f77b4", lw=1.2, label="roll")
    ax.plot(t, ser["pitch_error_deg"][s], color="#ff7f0e", lw=1.2, label="pitch")
    limits(ax, _limit(crit, "roll_error_max_deg"), label="roll limit")
    lp = _limit(crit, "pitch_error_max_deg")
    if lp is not None:
        ax.axhline(lp, color="#a05000", ls=":", lw=1, label="pitch limit")
        ax.axhline(-lp, color="#a05000", ls=":", lw=1)
    ax.set_ylabel("roll, pitch\n[deg]")

    ax = axes[2]
    cmd = A["command"][s]
    vh = ser["v_heading"][s]
    ax.plot(t, vh[:, 0], color="#1f77b4", lw=1.2, label="vx")
    ax.plot(t, cmd[:, 0], color="#1f77b4", lw=1, ls="--", label="vx command")
    ax.plot(t, vh[:, 1], color="#2ca02c", lw=1.2, label="vy")
    ax.plot(t, cmd[:, 1], color="#2ca02c", lw=1, ls="--", label="vy command")
    ax.set_ylabel("velocity, heading\nframe [m/s]")
    vr = _limit(crit, "velocity_rmse_max")
    if vr is not None:
        ax.text(0.995, 0.04, f"velocity RMSE {crit['velocity_rmse_max'].get('value') or 0:.3f} "
                f"(limit {vr:g}) m/s", transform=ax.transAxes, ha="right", fontsize=8, color="#444")

    ax = axes[3]
    ax.plot(t, ser["yaw_rate"][s], color="#9467bd", lw=1.2, label="yaw rate")
    ax.plot(t, cmd[:, 2], color="#9467bd", lw=1, ls="--", label="command")
    ax.set_ylabel("yaw rate\n[rad/s]")

    ax = axes[4]
    ff = A["foot_force"][s]
    for i in range(ff.shape[1]):
        name = foot_names[i] if foot_names and i < len(foot_names) else f"foot {i + 1}"
        ax.plot(t, ff[:, i, 2], lw=0.9, color=FOOT_COLOURS[i % len(FOOT_COLOURS)], label=name)
    ax.plot(t, ff[:, :, 2].sum(axis=1), color="black", lw=1.2, label="sum")
    ax.plot(t, A["total_mass"][s] * GRAVITY, color="black", lw=1, ls="--", label="weight m g")
    ax.set_ylabel("vertical foot\nforce [N]")

    for ax, name in zip(axes[5:], shown):
        values = A[PREFIX + name][s]
        flat = values.reshape(len(values), -1)
        for j in range(flat.shape[1]):
            ax.plot(t, flat[:, j], lw=1.0, color=SIGNAL_COLOURS[j % len(SIGNAL_COLOURS)],
                    label=name if flat.shape[1] == 1 else f"{name}[{j}]")
        ax.set_ylabel(f"signal\n{name}", fontsize=9)
    if len(signals) > len(shown):
        axes[-1].text(0.0, -0.3, f"+{len(signals) - len(shown)} more controller signals in trace.npz: "
                      + ", ".join(signals[len(shown):]), transform=axes[-1].transAxes, fontsize=7, color="#444")
    axes[-1].set_xlabel("time [s]")

    # Context on every panel: unscored start, events, first violation.
    t_end = float(A["t"][-1])
    events = result.get("events") or []
    fv = [c["first_violation_s"] for c in crit.values() if not c.get("passed") and c.get("first_violation_s") is not None]
    for ax in axes:
        if score_from:
            ax.axvspan(float(A["t"][0]), min(score_from, t_end), color="#888", alpha=0.12, lw=0)
        for e in events:
            t0, t1 = float(e["t_start"]), min(float(e["t_end"]), t_end)
            col = EVENT_COLOURS.get(e["kind"], "#8e44ad")
            ax.axvspan(t0, max(t1, t0 + (t_end - float(A["t"][0])) * 0.004), color=col, alpha=0.18, lw=0)
        if fv:
            ax.axvline(min(fv), color="#d62d20", lw=1.5)
        ax.grid(True, alpha=0.3)
        ax.legend(loc="upper right", fontsize=7, ncol=3, framealpha=0.7)
    top = axes[0]
    for i, e in enumerate(events[:8]):
        top.annotate(e["label"], xy=(float(e["t_start"]), 1.0), xycoords=("data", "axes fraction"),
                     xytext=(2, -10 - 9 * (i % 4)), textcoords="offset points", fontsize=7,
                     color=EVENT_COLOURS.get(e["kind"], "#8e44ad"))
    if len(events) > 8:
        top.text(0.0, 1.02, f"+{len(events) - 8} more events", transform=top.transAxes, fontsize=7)
    if score_from:
        top.text(float(A["t"][0]), 0.02, " not scored", transform=top.get_xaxis_transform(), fontsize=7, color="#666")
    if fv:
        top.text(min(fv), 0.02, f" first violation {min(fv):.2f} s", transform=top.get_xaxis_transform(),
                 fontsize=7, color="#d62d20")
    axes[-1].set_xlim(float(A["t"][0]), t_end)
    with atomic_target(path) as tmp:
        fig.savefig(tmp)
    return path


def plot_result(result_dir: str | Path, score_from: float | None = None,
                foot_names: list[str] | None = None) -> Path | None:
    """Plot one result folder into its ``plots.png``; None when it has no trace."""
    from bench.render.replay import load_recording

    rec = load_recording(result_dir, need_trace=False)
    if rec.trace is None:
        return None
    return plot_trace(rec.trace, rec.result, rec.dir / PLOTS_FILE, score_from, foot_names=foot_names)


#: Line colours of the two runs in an overlay plot (baseline, candidate): a colour-blind-safe pair.
OVERLAY_COLOURS = ("#1f77b4", "#d95f02")


def plot_overlay(runs, dpi: int = 80) -> bytes:
    """Two runs of one scenario on the same axes, as PNG bytes.

    ``runs``: two ``(label, trace, result)`` triples, the baseline first. Panels: height
    error, roll, pitch, forward velocity (with its command) and yaw rate. Limits come
    from the second run's criteria (dashed red); each run's first violation is a
    vertical line in its colour, and the end of an episode that stopped early is
    marked with a cross.
    """
    import io

    import matplotlib

    matplotlib.use("Agg", force=False)
    from matplotlib.figure import Figure

    from bench.scoring.metrics import error_series

    fig = Figure(figsize=(10, 9), dpi=dpi)
    fig.subplots_adjust(left=0.1, right=0.985, top=0.93, bottom=0.06, hspace=0.12)
    axes = fig.subplots(5, 1, sharex=True)
    sid = next((str(r.get("scenario")) for _, _, r in runs if r.get("scenario")), "?")
    fig.suptitle(f"{sid}: " + "  vs  ".join(f"{label} {str(r.get('status', '?')).upper()}" for label, _, r in runs),
                 fontsize=11)
    crit = _criteria(runs[-1][2])
    panels = (("height_error", 1000.0, "height error\n[mm]", ("height_error_max", "height_error_rms")),
              ("roll_error_deg", 1.0, "roll [deg]", ("roll_error_max_deg",)),
              ("pitch_error_deg", 1.0, "pitch [deg]", ("pitch_error_max_deg",)),
              ("vx", 1.0, "forward velocity\n[m/s]", ()),
              ("yaw_rate", 1.0, "yaw rate\n[rad/s]", ()))
    t_end = max((float(tr.arrays["t"][-1]) for _, tr, _ in runs if tr is not None and len(tr)), default=0.0)
    for i, (label, trace, result) in enumerate(runs):
        colour = OVERLAY_COLOURS[i % len(OVERLAY_COLOURS)]
        style = "--" if i == 0 else "-"
        if trace is None or len(trace) == 0:
            axes[0].text(0.01, 0.9 - 0.12 * i, f"{label}: no trace recorded", transform=axes[0].transAxes,
                         color=colour, fontsize=8)
            continue
        A = trace.arrays
        stride = max(1, math.ceil(len(trace) / MAX_POINTS))
        s = slice(None, None, stride)
        t = A["t"][s]
        ser = error_series(trace)
        ser["vx"] = ser["v_heading"][:, 0]
        for ax, (key, scale, _, _) in zip(axes, panels):
            ax.plot(t, ser[key][s] * scale, color=colour, lw=1.2, ls=style, label=label)
        axes[3].plot(t, A["command"][s][:, 0], color=colour, lw=0.8, ls=":", label=f"{label} command")
        fv = [c["first_violation_s"] for c in _criteria(result).values()
              if not c.get("passed") and c.get("first_violation_s") is not None]
        for ax in axes:
            if fv:
                ax.axvline(min(fv), color=colour, lw=1.3, alpha=0.8)
        if result.get("status") != "passed" and fv:
            axes[0].text(min(fv), 0.02 + 0.1 * i, f" {label}: first violation {min(fv):.2f} s",
                         transform=axes[0].get_xaxis_transform(), fontsize=7, color=colour)
        if float(A["t"][-1]) < t_end - 1e-9:       # this episode stopped before the other one (a fall, an error)
            for ax, (key, scale, _, _) in zip(axes, panels):
                ax.plot([float(A["t"][-1])], [float(ser[key][-1]) * scale], marker="x", ms=8, color=colour)
    for ax, (_, scale, ylabel, lims) in zip(axes, panels):
        for name in lims:
            lim = _limit(crit, name)
            if lim is not None:
                ax.axhline(lim * scale, color="#d62d20", ls="--", lw=0.9)
                ax.axhline(-lim * scale, color="#d62d20", ls="--", lw=0.9)
        ax.set_ylabel(ylabel)
        ax.grid(True, alpha=0.3)
        ax.legend(loc="upper right", fontsize=7, ncol=4, framealpha=0.7)
    axes[-1].set_xlabel("time [s]")
    if t_end > 0:
        axes[-1].set_xlim(0.0, t_end)
    buf = io.BytesIO()
    fig.savefig(buf, format="png")
    return buf.getvalue()


def plot_overlay_dirs(a_dir: str | Path, b_dir: str | Path, labels: tuple[str, str] = ("baseline", "candidate"),
                      dpi: int = 80) -> bytes | None:
    """:func:`plot_overlay` of two result folders; None when neither has a trace."""
    from bench.render.replay import load_recording

    recs = [load_recording(d, need_trace=False) for d in (a_dir, b_dir)]
    if all(r.trace is None for r in recs):
        return None
    return plot_overlay([(lab, r.trace, r.result) for lab, r in zip(labels, recs)], dpi=dpi)
