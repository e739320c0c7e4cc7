"""The curve of a limit search as a PNG: pass rate against the varied value."""

from __future__ import annotations

from pathlib import Path


def plot_curve(result, path: str | Path, *, title: str = "", xlabel: str = "value",
               required: float | None = None) -> Path:
    """Write ``result`` (a :class:`~bench.search.limit.LimitResult`) as a PNG at ``path``."""
    import io

    from matplotlib.figure import Figure  # no pyplot: no backend or global state touched

    from bench.report.results import write_atomic

    pts = result.curve
    fig = Figure(figsize=(7.0, 4.0), dpi=110)
    ax = fig.add_subplot(1, 1, 1)
    xs = [p.value for p in pts]
    ys = [p.pass_rate for p in pts]
    ax.plot(xs, ys, color="0.6", lw=1, zorder=1)
    for passed, colour, label in ((True, "tab:green", "passed"), (False, "tab:red", "failed")):
        sel = [p for p in pts if p.passed == passed]
        if not sel:
            continue
        x = [p.value for p in sel]
        y = [p.pass_rate for p in sel]
        if any(p.interval is not None and p.trials > 1 for p in sel):
            lo = [p.pass_rate - (p.interval[0] if p.interval else p.pass_rate) for p in sel]
            hi = [(p.interval[1] if p.interval else p.pass_rate) - p.pass_rate for p in sel]
            ax.errorbar(x, y, yerr=[lo, hi], fmt="none", ecolor=colour, alpha=0.5, capsize=3, zorder=2)
        ax.scatter(x, y, color=colour, label=label, zorder=3, s=28)
    if result.bracket is not None:
        a, b = sorted(result.bracket)
        ax.axvspan(a, b, color="tab:orange", alpha=0.2, label="bracket")
    if result.limit is not None:
        word = "largest" if result.direction == "max" else "smallest"
        ax.axvline(result.limit, color="tab:orange", ls="--",
                   label=f"{word} passing value {result.limit:.4g}" + (" (end of range)" if result.status ==
                                                                        "above-range" else ""))
    if required is not None:
        ax.axhline(required, color="0.3", ls=":", lw=1, label=f"required rate {required:g}")
    ax.set_ylim(-0.05, 1.05)
    ax.set_xlim(*result.range)
    ax.set_xlabel(xlabel)
    ax.set_ylabel("pass rate")
    ax.set_title(title or f"limit search: {result.status}", fontsize=10)
    ax.grid(alpha=0.3)
    ax.legend(fontsize=8, loc="best")
    fig.tight_layout()
    buf = io.BytesIO()
    fig.savefig(buf, format="png")
    path = Path(path)
    write_atomic(path, buf.getvalue())
    return path
