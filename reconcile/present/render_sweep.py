"""Rich output of ``reconcile solve --sweep``: the corners, each capacitor's share of the
low corner, the response at a readable number of frequencies, and a terminal Bode plot
of |gain| in dB."""

from __future__ import annotations

import math

import numpy as np
from rich.console import Console, Group
from rich.table import Table

from reconcile.engine.sweep import BoardSweep
from reconcile.present import numbers
from reconcile.present.console import make_console
from reconcile.present.escape import markup

#: at most this many rows in the response table (the JSON and --plot carry every point)
TABLE_ROWS = 13
PLOT_WIDTH = 60
PLOT_HEIGHT = 12
PLOT_DB_SPAN = 40.0  # dB shown below the peak


def _db(gain: np.ndarray) -> np.ndarray:
    with np.errstate(divide="ignore", invalid="ignore"):
        return 20.0 * np.log10(gain)


def corners_table(sw: BoardSweep) -> Table:
    t = Table(title="Frequency response", title_justify="left")
    t.add_column("quantity")
    t.add_column("value", justify="right")
    t.add_row("mid-band gain",
              f"{numbers.plain(sw.midband_gain, 4)} ({numbers.plain(_db(sw.midband_gain), 3)} dB)")
    if math.isfinite(sw.low_corner) and math.isfinite(sw.high_corner):
        t.add_row("mid-band peak at", numbers.si(sw.midband_frequency, "Hz", 3))
    t.add_row("low −3 dB corner", _corner(sw.low_corner, "none: coupled down to DC"))
    if sw.shares:
        t.add_row("  hand estimate (time constants)",
                  numbers.si(sw.low_corner_estimate, "Hz", 3))
    t.add_row("high −3 dB corner",
              _corner(sw.high_corner, "none in the model"))
    if not math.isfinite(sw.high_corner):
        t.caption = "no high corner: no transistor gives ft or c_mu, and there is no probe capacitance"
    return t


def _corner(hz: float, missing: str) -> str:
    return numbers.si(hz, "Hz", 4) if math.isfinite(hz) else missing


def shares_table(sw: BoardSweep) -> Table | None:
    if not sw.shares:
        return None
    t = Table(title="What sets the low corner", title_justify="left")
    for col in ("capacitor", "value", "R seen (others shorted)", "1/(2πRC)", "share"):
        t.add_column(col, justify="left" if col == "capacitor" else "right")
    for s in sorted(sw.shares, key=lambda s: -abs(s.share) if math.isfinite(s.share) else 0):
        t.add_row(markup(s.ref), numbers.si(s.farads, "F", 3),
                  numbers.si(s.resistance_seen, "Ω", 3), numbers.si(s.estimate_hz, "Hz", 3),
                  numbers.percent(s.share, sign=False))
    return t


def _rows(n: int) -> list[int]:
    if n <= TABLE_ROWS:
        return list(range(n))
    return sorted({int(round(x)) for x in np.linspace(0, n - 1, TABLE_ROWS)})


def points_table(sw: BoardSweep) -> Table:
    shown = _rows(len(sw.frequency))
    title = "Response" if len(shown) == len(sw.frequency) else (
        f"Response ({len(shown)} of {len(sw.frequency)} points; --json or --plot for all)")
    t = Table(title=title, title_justify="left")
    for col in ("frequency", "|gain|", "dB", "phase", "|Zin|", "|Zout|"):
        t.add_column(col, justify="right")
    for i in shown:
        t.add_row(numbers.si(sw.frequency[i], "Hz", 3), numbers.plain(sw.gain[i], 4),
                  f"{numbers.plain(_db(sw.gain[i]), 3)} dB",
                  f"{sw.gain_phase_deg[i]:.1f}°",
                  numbers.si(sw.input_resistance[i], "Ω", 3),
                  numbers.si(sw.output_resistance[i], "Ω", 3))
    return t


def bode_text(sw: BoardSweep, width: int = PLOT_WIDTH, height: int = PLOT_HEIGHT) -> str:
    """|gain| in dB against log frequency as characters: ``*`` the response, ``-`` the
    −3 dB line, ``|`` the corners."""
    f = sw.frequency
    db = _db(sw.gain)
    ok = np.isfinite(db)
    if ok.sum() < 2:
        return "(no finite gain to plot)"
    top = math.ceil(float(np.nanmax(db[ok])))
    bottom = top - PLOT_DB_SPAN
    lf = np.log10(f)
    cols = np.clip(np.round((lf - lf[0]) / (lf[-1] - lf[0]) * (width - 1)).astype(int), 0, width - 1)
    grid = [[" "] * width for _ in range(height)]

    def row_of(value: float) -> int:
        r = round((top - value) / (top - bottom) * (height - 1))
        return min(max(r, 0), height - 1)

    if math.isfinite(sw.midband_gain):
        r3 = row_of(float(_db(sw.midband_gain)) - 3.0103)
        grid[r3] = ["-"] * width
    for corner in (sw.low_corner, sw.high_corner):
        if math.isfinite(corner) and f[0] <= corner <= f[-1]:
            c = round((math.log10(corner) - lf[0]) / (lf[-1] - lf[0]) * (width - 1))
            for r in range(height):
                grid[r][c] = "|"
    for k in np.flatnonzero(ok):
        if db[k] >= bottom:
            grid[row_of(float(db[k]))][cols[k]] = "*"
    lines = []
    for r in range(height):
        label = f"{top - r * (top - bottom) / (height - 1):6.1f} dB " if r % 3 == 0 else " " * 10
        lines.append(label + "".join(grid[r]))
    left, right = numbers.si(f[0], "Hz", 3), numbers.si(f[-1], "Hz", 3)
    lines.append(" " * 10 + left + " " * max(1, width - len(left) - len(right)) + right)
    return "\n".join(lines)


def sweep_view(sw: BoardSweep) -> Group:
    parts: list = [corners_table(sw)]
    shares = shares_table(sw)
    if shares is not None:
        parts.append(shares)
    parts += [points_table(sw), "|gain| (dB) against frequency:", markup(bode_text(sw))]
    return Group(*parts)


def print_sweep(sw: BoardSweep, console: Console | None = None) -> None:
    (console or make_console()).print(sweep_view(sw))
