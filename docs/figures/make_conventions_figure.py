"""Draw docs/figures/conventions.png: image frame, sample axes, a plane, its trace and angle, tilt axis.

Run from the repository root:  python docs/figures/make_conventions_figure.py
The plane drawn is fcc (1-11) at Bunge (0, 45, 0), a worked vector of docs/conventions.md
(trace 35.264 deg, plane upright); the numbers come from tracefit itself.
"""

from __future__ import annotations

from pathlib import Path

import matplotlib

matplotlib.use("Agg")
import matplotlib.pyplot as plt  # noqa: E402
import numpy as np  # noqa: E402
from matplotlib.patches import Arc, FancyArrowPatch, Polygon  # noqa: E402

from tracefit.conventions import FrameSettings, apparent_angle  # noqa: E402
from tracefit.crystal.lattice import lattice_preset  # noqa: E402
from tracefit.crystal.orientation import from_euler  # noqa: E402
from tracefit.predict.traces import predicted_trace_table  # noqa: E402

OUT = Path(__file__).with_name("conventions.png")


def arrow(ax, p, q, color="k", lw=1.6, **kw):
    ax.add_patch(FancyArrowPatch(p, q, arrowstyle="-|>", mutation_scale=14, color=color, lw=lw, **kw))


def main() -> None:
    lat = lattice_preset("fcc")
    tab = predicted_trace_table(lat, from_euler([0, 45, 0]), [(1, -1, 1)], indices=True)
    a = float(tab.angle_deg[0])
    incl = float(tab.inclination_deg[0])
    tilt = FrameSettings(tilt_deg=60.0)
    a45 = float(apparent_angle(45.0, tilt))

    fig, (ax, bx) = plt.subplots(1, 2, figsize=(10, 4.8), dpi=90, gridspec_kw={"width_ratios": [1.15, 1]})
    # ---------------------------------------------------------------- left: image frame and a trace
    ax.set_aspect("equal")
    ax.set_xlim(-0.15, 1.25)
    ax.set_ylim(-0.2, 1.2)
    ax.axis("off")
    ax.add_patch(Polygon([(0, 0), (1, 0), (1, 1), (0, 1)], closed=True, fill=True, fc="#f3f1ea", ec="0.3"))
    ax.text(0.02, 1.03, "image (as shown on screen)", fontsize=9, color="0.3")
    o = np.array([0.08, 0.08])
    arrow(ax, o, o + [0.32, 0], "tab:red")
    arrow(ax, o, o + [0, 0.32], "tab:green")
    ax.text(o[0] + 0.34, o[1] - 0.02, "x = X (right)", color="tab:red", fontsize=9, va="center")
    ax.text(o[0] - 0.02, o[1] + 0.35, "y = Y (up)", color="tab:green", fontsize=9)
    ax.plot(*o, "o", ms=9, mfc="white", mec="tab:blue")
    ax.plot(*o, ".", ms=4, color="tab:blue")
    ax.text(o[0] + 0.04, o[1] - 0.065, "Z toward viewer", color="tab:blue", fontsize=7)
    # trace through the centre
    c = np.array([0.55, 0.55])
    t = np.array([np.cos(np.radians(a)), np.sin(np.radians(a))])
    ax.plot(*np.array([c - 0.5 * t, c + 0.5 * t]).T, color="tab:purple", lw=3)
    ax.plot([c[0], c[0] + 0.42], [c[1], c[1]], color="0.4", lw=1, ls="--")
    ax.add_patch(Arc(c, 0.42, 0.42, theta1=0, theta2=a, color="tab:purple", lw=1.4))
    ax.text(c[0] + 0.24, c[1] + 0.06, f"{a:.3f}\u00b0", color="tab:purple", fontsize=10)
    ax.text(0.43, 0.14, "trace of (1-11), fcc, Bunge (0, 45, 0)\n"
            f"direction Z \u00d7 n; angle ccw from x, axial [0, 180)\ninclination {incl:.1f}\u00b0 (plane upright)",
            fontsize=7.5, color="tab:purple", va="bottom")
    # tilt axis
    arrow(ax, (-0.1, -0.12), (1.15, -0.12), "tab:orange", lw=1.2)
    ax.text(0.3, -0.185, "tilt axis (tilt-axis x): image horizontal", color="tab:orange", fontsize=8)
    ax.add_patch(Arc((1.18, -0.12), 0.08, 0.16, theta1=-120, theta2=150, color="tab:orange", lw=1.2))
    ax.set_title("frames and a predicted trace", fontsize=10)

    # ---------------------------------------------------------------- right: a plane meeting the surface
    bx.set_aspect("equal")
    bx.axis("off")
    bx.set_xlim(-1.3, 1.4)
    bx.set_ylim(-1.1, 1.45)
    # oblique view of the surface square and an inclined plane through it
    def proj(p):
        x, y, z = p
        return np.array([x + 0.45 * y, 0.35 * y + z])

    sq = [proj(p) for p in ((-1, -1, 0), (1, -1, 0), (1, 1, 0), (-1, 1, 0))]
    bx.add_patch(Polygon(sq, closed=True, fc="#f3f1ea", ec="0.3"))
    phi = np.radians(55.0)  # plane inclination in this sketch
    n = np.array([0.0, -np.sin(phi), np.cos(phi)])  # normal: trace along x
    u = np.array([1.0, 0, 0])
    w = np.cross(n, u)
    pl = [proj(s * u * 0.9 + r * w * 0.9) for s, r in ((-1, 0), (1, 0), (1, 1), (-1, 1))]
    bx.add_patch(Polygon(pl, closed=True, fc="tab:purple", alpha=0.25, ec="tab:purple"))
    bx.plot(*np.array([proj(-0.9 * u), proj(0.9 * u)]).T, color="tab:purple", lw=3)
    bx.text(*proj((0.95, 0.0, 0.0)) + [0.02, -0.12], "trace", color="tab:purple", fontsize=9)
    arrow(bx, proj((0, 0, 0)), proj(0.8 * n), "tab:blue")
    bx.text(*proj(0.85 * n), "n", color="tab:blue", fontsize=10)
    arrow(bx, proj((0, 0, 0)), proj((0, 0, 1.05)), "0.3", lw=1.0)
    bx.text(*proj((0, 0, 1.1)), "Z", fontsize=9)
    bx.text(-1.25, -1.05, "inclination = arccos|n_Z|: angle between plane and surface\n"
            "(near 0: plane lies in the surface, no usable trace)", fontsize=8)
    bx.text(-1.25, 1.3, f"stage tilt \u03b1 about x: tan(apparent) = tan(true) cos \u03b1\n"
            f"45\u00b0 true at 60\u00b0 tilt appears at {a45:.3f}\u00b0", fontsize=8, color="tab:orange")
    bx.set_title("plane, normal and inclination", fontsize=10)

    fig.tight_layout()
    fig.savefig(OUT, dpi=90)
    print(f"wrote {OUT} ({OUT.stat().st_size / 1024:.0f} kB)")


if __name__ == "__main__":
    main()
