"""Draw the convention figures used in docs/conventions.md.

Run from the repository root::

    python docs/figures/make_figures.py

The PNG files are written next to this script (docs/figures/). The output is deterministic: no
random numbers, no timestamps in the files (the PNG "Software" tag is dropped), fixed sizes and
resolution.

Figures
-------
lab_frame.png
    Top view of the horizontal plane: lab axes x (south), y (east), z (up, out of the page), the
    two paths of an orthogonal pair at turntable angle theta (C6, C8), the file azimuth A of path 1
    (C7) and the rotation sense for d(theta)/dt > 0.
azimuth_vs_theta.png
    A and theta over one turn of a counter-clockwise table, with cos 2theta, sin 2theta, cos 2A and
    -sin 2A showing the sign rule sin 2theta = -sin 2A, cos 2theta = cos 2A.
sccef_lab.png
    The SCCEF axes X, Y, Z, a lab at colatitude chi and sidereal angle phi, and the lab triad
    (south, east, up) given by the rows of the rotation matrix R (C2, C4, C5).

The angle conversions are taken from ``fringe.conventions`` so that the figures show what the code
does; the geometry of figure 3 uses the rows of R as written in docs/theory.md.
"""

from __future__ import annotations

import sys
from pathlib import Path

import matplotlib

matplotlib.use("Agg")

import matplotlib.pyplot as plt  # noqa: E402
import numpy as np  # noqa: E402
from matplotlib.patches import Arc, Circle, FancyArrowPatch  # noqa: E402

OUT_DIR = Path(__file__).resolve().parent
REPO_ROOT = OUT_DIR.parents[1]
if str(REPO_ROOT) not in sys.path:
    sys.path.insert(0, str(REPO_ROOT))

from fringe.conventions import (  # noqa: E402
    azimuth_from_theta,
    horizontal_direction_lab,
    theta_from_azimuth,
)

DPI = 130
SAVE_KW = {"dpi": DPI, "metadata": {"Software": None}}

COLOR_PATH1 = "#c0392b"
COLOR_PATH2 = "#1f5fa8"
COLOR_AXES = "#222222"
COLOR_THETA = "#1e8449"
COLOR_AZ = "#8e44ad"


def _page_xy(lab_vector: np.ndarray) -> np.ndarray:
    """Page coordinates (right, up) of a horizontal lab vector (south, east, up).

    The page is a map seen from above with north up and east to the right, so lab x (south) points
    down the page and lab y (east) to the right; lab z (up) then points out of the page and
    (x, y, z) stays right-handed.
    """
    south, east = lab_vector[..., 0], lab_vector[..., 1]
    return np.stack([east, -south], axis=-1)


def _page_angle_deg(theta_rad: float) -> float:
    """Page angle (counter-clockwise from the page's +right direction) of a path at theta."""
    right, up = _page_xy(np.array([np.cos(theta_rad), np.sin(theta_rad), 0.0]))
    return float(np.degrees(np.arctan2(up, right)))


def _arrow(ax, start, end, color, lw=2.0, style="-|>", mutation=16, **kw):
    ax.add_patch(
        FancyArrowPatch(
            start,
            end,
            arrowstyle=style,
            mutation_scale=mutation,
            color=color,
            lw=lw,
            shrinkA=0,
            shrinkB=0,
            **kw,
        )
    )


def _arc_with_head(ax, radius, start_deg, end_deg, color, lw=1.6):
    """Arc drawn counter-clockwise (page sense) from start_deg to end_deg if end > start, else
    clockwise; an arrow head marks the end point."""
    lo, hi = sorted((start_deg, end_deg))
    ax.add_patch(Arc((0, 0), 2 * radius, 2 * radius, theta1=lo, theta2=hi, color=color, lw=lw))
    sense = 1.0 if end_deg > start_deg else -1.0
    e = np.radians(end_deg)
    tip = np.array([radius * np.cos(e), radius * np.sin(e)])
    tangent = sense * np.array([-np.sin(e), np.cos(e)])
    _arrow(ax, tip - 0.09 * tangent, tip, color, lw=lw, mutation=13)


def figure_lab_frame(path: Path) -> None:
    """Top view of the lab frame with an orthogonal pair at theta = 60 deg."""
    theta1 = np.radians(60.0)
    azimuth1 = float(azimuth_from_theta(theta1))  # C7: A = pi - theta
    theta2 = theta1 - np.pi / 2  # C8: path 2 at A1 + 90 deg
    azimuth2 = azimuth1 + np.pi / 2
    if not np.isclose(np.cos(float(theta_from_azimuth(azimuth2)) - theta2), 1.0):
        raise RuntimeError("path 2 at A1 + 90 deg should sit at theta1 - 90 deg")

    fig, ax = plt.subplots(figsize=(7.2, 7.2))
    ax.set_aspect("equal")
    ax.set_xlim(-1.55, 1.55)
    ax.set_ylim(-1.55, 1.6)
    ax.axis("off")

    # turntable
    ax.add_patch(Circle((0, 0), 1.0, facecolor="#f4f1ea", edgecolor="#9a8f7a", lw=1.2))

    # compass labels
    for text, xy in (("N", (0, 1.38)), ("S", (0, -1.42)), ("E", (1.40, 0)), ("W", (-1.40, 0))):
        ax.text(*xy, text, ha="center", va="center", fontsize=17, fontweight="bold")
    ax.plot([0, 0], [-1.25, 1.25], color="#bbbbbb", lw=0.8, ls=":", zorder=0)
    ax.plot([-1.25, 1.25], [0, 0], color="#bbbbbb", lw=0.8, ls=":", zorder=0)

    # lab axes: x south (down the page), y east (right), z up (out of the page)
    x_tip = _page_xy(np.array([1.15, 0.0, 0.0]))
    y_tip = _page_xy(np.array([0.0, 1.15, 0.0]))
    _arrow(ax, (0, 0), tuple(x_tip), COLOR_AXES, lw=1.4)
    _arrow(ax, (0, 0), tuple(y_tip), COLOR_AXES, lw=1.4)
    ax.text(x_tip[0] + 0.06, x_tip[1] + 0.02, "x (south)", fontsize=12, ha="left", va="bottom")
    ax.text(y_tip[0] - 0.02, y_tip[1] + 0.05, "y (east)", fontsize=12, ha="right", va="bottom")
    ax.add_patch(Circle((0, 0), 0.055, facecolor="white", edgecolor=COLOR_AXES, lw=1.4, zorder=5))
    ax.add_patch(Circle((0, 0), 0.016, facecolor=COLOR_AXES, edgecolor=COLOR_AXES, zorder=6))
    ax.text(-0.08, 0.07, "z (up, out of page)", fontsize=11, ha="right", va="bottom")

    # the two paths (arms / cavity axes), from the fringe convention functions
    for az, colour, label, offset in (
        (azimuth1, COLOR_PATH1, "path 1\n(at θ)", (0.16, -0.16)),
        (azimuth2, COLOR_PATH2, "path 2\n(at θ − 90°)", (-0.22, -0.13)),
    ):
        tip = _page_xy(horizontal_direction_lab(np.array([az]))[0]) * 0.92
        ax.plot([0, tip[0]], [0, tip[1]], color=colour, lw=7, solid_capstyle="butt", alpha=0.85)
        ax.plot(*tip, marker="s", ms=10, color=colour)
        ax.text(
            tip[0] + offset[0],
            tip[1] + offset[1],
            label,
            color=colour,
            fontsize=12,
            ha="center",
            va="center",
            fontweight="bold",
        )

    # theta: from south (x axis) counter-clockwise to path 1
    ang_south = _page_angle_deg(0.0)
    ang_p1 = _page_angle_deg(theta1)
    _arc_with_head(ax, 0.42, ang_south, ang_p1, COLOR_THETA)
    mid = np.radians(0.5 * (ang_south + ang_p1))
    ax.text(
        0.52 * np.cos(mid),
        0.52 * np.sin(mid),
        "θ",
        color=COLOR_THETA,
        fontsize=16,
        ha="center",
        va="center",
        fontweight="bold",
    )

    # A: from north clockwise (compass sense) to path 1
    ang_north = 90.0
    _arc_with_head(ax, 0.66, ang_north, ang_p1, COLOR_AZ)
    mid = np.radians(0.5 * (ang_north + ang_p1))
    ax.text(
        0.76 * np.cos(mid),
        0.76 * np.sin(mid),
        "A",
        color=COLOR_AZ,
        fontsize=16,
        ha="center",
        va="center",
        fontweight="bold",
    )

    # rotation sense for d(theta)/dt > 0: counter-clockwise seen from above
    ax.add_patch(Arc((0, 0), 2.36, 2.36, theta1=120, theta2=165, color="#555555", lw=2.0))
    e = np.radians(165.0)
    tip = 1.18 * np.array([np.cos(e), np.sin(e)])
    tangent = np.array([-np.sin(e), np.cos(e)])
    _arrow(ax, tuple(tip - 0.1 * tangent), tuple(tip), "#555555", lw=2.0, mutation=16)
    ax.text(
        -1.05,
        1.16,
        "dθ/dt > 0\n(counter-clockwise\nseen from above)",
        fontsize=10.5,
        ha="center",
        va="bottom",
        color="#333333",
    )

    ax.text(
        1.52,
        -1.52,
        f"θ = {np.degrees(theta1):.0f}° (south → east)\n"
        f"A = {np.degrees(azimuth1):.0f}° (north → east)\n"
        "θ = π − A\n"
        "path 2: A₂ = A₁ + 90°, θ₂ = θ₁ − 90°",
        fontsize=11,
        ha="right",
        va="bottom",
        bbox={"boxstyle": "round,pad=0.4", "facecolor": "white", "edgecolor": "#999999"},
    )
    ax.set_title("Lab frame, top view (conventions C4, C6, C7, C8)", fontsize=13)
    fig.tight_layout()
    fig.savefig(path, **SAVE_KW)
    plt.close(fig)


def figure_azimuth_vs_theta(path: Path) -> None:
    """A and theta over one counter-clockwise turn, and the 2theta sign rule."""
    turn = np.linspace(0.0, 1.0, 721)  # t / T_rot
    theta = 2 * np.pi * turn  # theta(t) = omega_R t, theta(0) = 0 (south)
    azimuth = np.mod(azimuth_from_theta(theta), 2 * np.pi)
    # the round trip back through fringe's inverse conversion, as a consistency check on the plot
    theta_back = np.mod(theta_from_azimuth(azimuth), 2 * np.pi)
    if not np.allclose(np.cos(theta_back), np.cos(theta)) or not np.allclose(
        np.sin(theta_back), np.sin(theta)
    ):
        raise RuntimeError("theta_from_azimuth is not the inverse of azimuth_from_theta")

    def broken(y):  # break the line where A wraps 0 -> 360
        y = y.copy()
        y[np.abs(np.diff(y, prepend=y[0])) > np.pi] = np.nan
        return y

    fig, (ax1, ax2) = plt.subplots(
        2, 1, figsize=(7.6, 6.8), sharex=True, gridspec_kw={"height_ratios": [1, 1.15]}
    )
    ax1.plot(turn, np.degrees(theta), color=COLOR_THETA, lw=2.2, label="θ (from south toward east)")
    ax1.plot(
        turn,
        np.degrees(broken(azimuth)),
        color=COLOR_AZ,
        lw=2.2,
        label="A = π − θ (from north toward east), mod 360°",
    )
    ax1.set_ylabel("angle of path 1 (deg)", fontsize=11)
    ax1.set_ylim(0, 360)
    ax1.set_yticks([0, 90, 180, 270, 360])
    ax1.grid(alpha=0.3)
    ax1.legend(loc="upper left", fontsize=9.5, framealpha=0.95, ncol=1)
    for frac, name in ((0.0, "S"), (0.25, "E"), (0.5, "N"), (0.75, "W"), (1.0, "S")):
        ax1.annotate(
            name, (frac, 362), ha="center", va="bottom", fontsize=10, annotation_clip=False
        )
    ax1.set_title(
        "Counter-clockwise table (dθ/dt > 0): path 1 points toward S, E, N, W, S",
        fontsize=11.5,
        pad=24,
    )

    ax2.plot(turn, np.cos(2 * theta), color="#d35400", lw=2.4, label="cos 2θ")
    ax2.plot(
        turn,
        np.cos(2 * azimuth),
        color="#222222",
        lw=1.2,
        ls=(0, (4, 3)),
        label="cos 2A  (= cos 2θ)",
    )
    ax2.plot(turn, np.sin(2 * theta), color="#2471a3", lw=2.4, label="sin 2θ")
    ax2.plot(
        turn,
        -np.sin(2 * azimuth),
        color="#f1c40f",
        lw=1.3,
        ls=(0, (4, 3)),
        label="−sin 2A  (= sin 2θ)",
    )
    ax2.plot(
        turn, np.sin(2 * azimuth), color="#7f8c8d", lw=1.0, ls=":", label="sin 2A  (opposite sign)"
    )
    ax2.set_xlabel(
        "time in units of the rotation period, t / T_rot  (θ(0) = 0, path 1 south)", fontsize=11
    )
    ax2.set_ylabel("2θ harmonics", fontsize=11)
    ax2.set_ylim(-1.25, 1.85)
    ax2.set_xlim(0, 1)
    ax2.set_xticks([0, 0.25, 0.5, 0.75, 1.0])
    ax2.grid(alpha=0.3)
    ax2.legend(loc="upper center", fontsize=9.5, ncol=3, framealpha=0.95)
    fig.tight_layout()
    fig.savefig(path, **SAVE_KW)
    plt.close(fig)


def _rotation_sccef_to_lab(chi_rad: float, phi_rad: float) -> np.ndarray:
    """Rows: local south, local east, zenith, in SCCEF components (docs/theory.md, matrix R)."""
    sc, cc, sp, cp = np.sin(chi_rad), np.cos(chi_rad), np.sin(phi_rad), np.cos(phi_rad)
    return np.array([[cc * cp, cc * sp, -sc], [-sp, cp, 0.0], [sc * cp, sc * sp, cc]])


def figure_sccef_lab(path: Path) -> None:
    """SCCEF axes, a lab at colatitude chi and sidereal angle phi, and the lab triad."""
    chi = np.radians(50.0)
    phi = np.radians(55.0)
    rot = _rotation_sccef_to_lab(chi, phi)
    if not (np.allclose(rot @ rot.T, np.eye(3)) and np.isclose(np.linalg.det(rot), 1.0)):
        raise RuntimeError("R is not a proper rotation")
    south, east, up = rot
    site = up  # unit sphere: the site lies along its zenith

    fig = plt.figure(figsize=(7.0, 6.6))
    ax = fig.add_subplot(projection="3d", computed_zorder=False)
    ax.view_init(elev=18, azim=22)

    # a faint unit sphere (Earth; only directions matter for the rotation R)
    u, v = np.meshgrid(np.linspace(0, 2 * np.pi, 25), np.linspace(0, np.pi, 13))
    ax.plot_wireframe(
        np.cos(u) * np.sin(v), np.sin(u) * np.sin(v), np.cos(v), color="#c8d3e0", lw=0.4
    )
    t = np.linspace(0, 2 * np.pi, 200)
    ax.plot(np.cos(t), np.sin(t), 0 * t, color="#5d6d7e", lw=1.2)  # equator
    s = np.linspace(0, np.pi, 100)  # site meridian
    ax.plot(
        np.cos(phi) * np.sin(s),
        np.sin(phi) * np.sin(s),
        np.cos(s),
        color="#5d6d7e",
        lw=1.0,
        ls="--",
    )

    # SCCEF axes
    for vec, name, where in (
        ((1.75, 0, 0), "X (vernal equinox)", (2.0, 0, -0.12)),
        ((0, 1.6, 0), "Y (RA 90°)", (0, 1.72, 0.1)),
        ((0, 0, 1.6), "Z (celestial north)", (0, 0, 1.72)),
    ):
        ax.quiver(0, 0, 0, *vec, color="black", lw=1.6, arrow_length_ratio=0.07)
        ax.text(*where, name, fontsize=11, ha="center")

    # phi in the equatorial plane, from X to the site meridian
    a = np.linspace(0, phi, 40)
    ax.plot(0.55 * np.cos(a), 0.55 * np.sin(a), 0 * a, color=COLOR_THETA, lw=2.2)
    ax.plot([0, np.cos(phi)], [0, np.sin(phi)], [0, 0], color=COLOR_THETA, lw=1.0, ls=":")
    ax.text(
        0.7 * np.cos(phi / 2),
        0.7 * np.sin(phi / 2),
        -0.08,
        "φ",
        color=COLOR_THETA,
        fontsize=16,
        fontweight="bold",
    )

    # chi from Z to the zenith
    c = np.linspace(0, chi, 40)
    ax.plot(
        0.5 * np.cos(phi) * np.sin(c),
        0.5 * np.sin(phi) * np.sin(c),
        0.5 * np.cos(c),
        color=COLOR_AZ,
        lw=2.2,
    )
    ax.plot([0, site[0]], [0, site[1]], [0, site[2]], color=COLOR_AZ, lw=1.0, ls=":")
    ax.text(
        0.62 * np.cos(phi) * np.sin(chi / 2),
        0.62 * np.sin(phi) * np.sin(chi / 2),
        0.62 * np.cos(chi / 2),
        "χ",
        color=COLOR_AZ,
        fontsize=16,
        fontweight="bold",
    )

    # lab triad at the site
    for vec, name, colour in (
        (south, "x (south)", COLOR_PATH1),
        (east, "y (east)", COLOR_PATH2),
        (up, "z (up)", "#117a65"),
    ):
        ax.quiver(*site, *(0.6 * vec), color=colour, lw=2.2, arrow_length_ratio=0.18)
        ax.text(*(site + 0.72 * vec), name, color=colour, fontsize=11.5, fontweight="bold")
    ax.scatter(*site, color="black", s=22, depthshade=False)

    lim = 1.3
    ax.set_xlim(-lim, lim)
    ax.set_ylim(-lim, lim)
    ax.set_zlim(-lim, lim)
    ax.set_box_aspect((1, 1, 1), zoom=1.12)
    ax.set_axis_off()
    ax.set_title(
        "SCCEF axes and the lab at colatitude χ, sidereal angle φ\n"
        "(C2, C4, C5; drawn for χ = 50°, φ = 55°)",
        fontsize=12,
    )
    fig.text(
        0.5,
        0.2,
        "φ = ERA(UT1) + east longitude. At φ = 0 the X axis lies in the local meridian\n"
        "and lab y (east) is parallel to Y. The Earth is drawn at the origin: R uses "
        "directions only.",
        ha="center",
        fontsize=10,
    )
    fig.subplots_adjust(left=0.0, right=1.0, top=0.86, bottom=0.1)
    fig.savefig(path, bbox_inches="tight", pad_inches=0.15, **SAVE_KW)
    plt.close(fig)


def main() -> None:
    outputs = {
        "lab_frame.png": figure_lab_frame,
        "azimuth_vs_theta.png": figure_azimuth_vs_theta,
        "sccef_lab.png": figure_sccef_lab,
    }
    for name, draw in outputs.items():
        target = OUT_DIR / name
        tmp = target.with_name(target.stem + ".tmp.png")
        try:
            draw(tmp)
        except BaseException:
            tmp.unlink(missing_ok=True)
            raise
        tmp.replace(target)  # write whole or not at all
        print(f"wrote {target.relative_to(REPO_ROOT)} ({target.stat().st_size / 1024:.0f} kB)")


if __name__ == "__main__":
    main()
