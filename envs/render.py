"""A picture of a trial for ``render_mode="rgb_array"``: the "rock-pool board".

The board shows the whole command set at once: every menu as an open column (titles on a tab row,
items top to bottom with their hotkeys), a recall bar under each item (the probability that the
user recalls that item's hotkey at the upcoming trial's memory clock), the last trial's command
outlined solid and the upcoming target outlined dashed, the path the last action took (pointer to
the menu tab and down to the item for menu and learn, keyboard to the hotkey for a hotkey attempt;
a failed attempt shows a cross at the hotkey and the fallback menu path), the pointing device and
the keyboard with a marker where the hand is now, and a strip with the last trial's time split by
operator. Drawn with matplotlib's object API (``Figure`` + ``FigureCanvasAgg``), so the global
backend is never touched. The look is this project's own design.
"""

from __future__ import annotations

from dataclasses import dataclass, field
from typing import TYPE_CHECKING, Any

import numpy as np

from shortcut_gym.envs import kernel as k

if TYPE_CHECKING:
    from shortcut_gym.envs.simulator import BatchSimulator
    from shortcut_gym.envs.task import CommandSet

#: Frame size in pixels (width, height).
FRAME_W, FRAME_H = 800, 480
_DPI = 100

# palette of the board (this project's own): night water, sand panels, coral and kelp accents
_BG = "#0f2233"
_PANEL = "#f4ecd8"
_TAB = "#d9c9a3"
_INK = "#1b1b1b"
_DIM = "#8a8f96"
_CORAL = "#ff6f59"
_KELP = "#2a9d8f"
_FAIL = "#d62839"
_FORGOT = "#f4a261"
_BAR_BG = "#e4d9bd"
_BAR = "#3d7ea6"  # the recall bars' own colour, used for nothing else
_OP_COLOURS = ("#264653", "#2a9d8f", "#8ab17d", "#e9c46a", "#f4a261", "#e76f51",
               "#9c6644", "#6d597a", "#b56576", "#457b9d")
_OUTCOME_COLOURS = {"menu": _KELP, "hotkey": _KELP, "learned": _KELP, "hotkey_forgotten": _FORGOT,
                    "hotkey_wrong": _FAIL}


@dataclass(frozen=True)
class TrialScene:
    """What the board shows: the last trial (if any) and the state before the upcoming one.

    ``recall`` holds each command's recall probability at the upcoming trial's memory clock (after
    the last trial, one trial interval later); ``hand_before_keyboard`` is where the hand was at
    the start of the last trial, ``hand_on_keyboard`` where it is now.
    """

    trials_done: int
    horizon: int
    session: int  # 0-based session of the upcoming trial (of the last one once done)
    n_sessions: int
    upcoming: int | None  # command index of the upcoming target; None once the horizon is reached
    recall: np.ndarray
    hand_on_keyboard: bool
    last_command: int | None = None
    last_action: int | None = None
    last_outcome: str | None = None
    last_duration_s: float | None = None
    last_p_recall: float | None = None
    hand_before_keyboard: bool | None = None
    last_time_s: dict[str, float] = field(default_factory=dict)


def recall_probabilities(sim: BatchSimulator, user: int = 0) -> np.ndarray:
    """Recall probability of every command of ``user`` at the upcoming trial's memory clock.

    Once the horizon is reached, at the last trial's clock plus the last trial interval (1 s for
    a one-trial schedule), so that the last trial's own trace has a positive age.
    """
    t, h = sim.user_state_of(user).trial, sim.horizon
    clock = sim.sched_clock[user]
    if t < h:
        now = float(clock[t])
    else:
        now = float(clock[h - 1]) + (float(clock[h - 1] - clock[h - 2]) if h > 1 else 1.0)
    n_cmd = sim.command_float_state.shape[1]
    out = np.empty(n_cmd)
    for c in range(n_cmd):
        a = k.activation(sim.kernel_int_params, sim.kernel_params, sim.command_float_state[user, c],
                         sim.command_counts[user, c], sim.traces[user, c], now)
        out[c] = k.recall_p(sim.kernel_params, a)
    return out


def scene_of(sim: BatchSimulator, last: dict[str, Any] | None, user: int = 0) -> TrialScene:
    """The :class:`TrialScene` of one user of a simulator after the trial described by ``last``.

    ``last`` is the env's info of the last step (``command``, ``action``, ``outcome``,
    ``duration_s``, ``p_recall``, ``time_s``) or None before the first trial. Where the hand was
    before that trial is read back from its time breakdown: a menu or learn trial pays H only from
    the keyboard, a hotkey attempt pays H only from the pointing device.
    """
    state = sim.user_state_of(user)
    t, h = state.trial, sim.horizon
    tt = min(t, h - 1)
    scene: dict[str, Any] = {
        "trials_done": t,
        "horizon": h,
        "session": int(sim.sched_session[user, tt]),
        "n_sessions": int(sim.sched_session[user, h - 1]) + 1,
        "upcoming": int(sim.sched_command[user, t]) if t < h else None,
        "recall": recall_probabilities(sim, user),
        "hand_on_keyboard": state.hand == k.HAND_KEYBOARD,
    }
    if last is not None:
        time_s = dict(last["time_s"])
        paid_h = time_s.get("H", 0.0) > 0.0
        action = int(last["action"])
        scene.update(
            last_command=int(last["command"]),
            last_action=action,
            last_outcome=str(last["outcome"]),
            last_duration_s=float(last["duration_s"]),
            last_p_recall=float(last["p_recall"]),
            hand_before_keyboard=(not paid_h) if action == k.HOTKEY else paid_h,
            last_time_s=time_s,
        )
    return TrialScene(**scene)


@dataclass(frozen=True)
class BoardRow:
    """Where one command's row sits on the board (pixels, y downwards)."""

    x0: float
    y: float
    width: float
    height: float
    font: float
    tab: tuple[float, float]

    @property
    def item(self) -> tuple[float, float]:
        return (self.x0 + 8, self.y + self.height * 0.32)

    @property
    def hotkey(self) -> tuple[float, float]:
        return (self.x0 + self.width - 12, self.y + self.height * 0.70)

    @property
    def bar(self) -> tuple[float, float, float, float]:
        """x, y, width, height of the recall bar."""
        return (self.x0 + 10, self.y + self.height * 0.62, self.width * 0.42, max(2.0, self.height * 0.16))


class BoardPainter:
    """Draws :class:`TrialScene` s of one command set into RGB frames.

    What never changes (menus, names, hotkeys, devices) is drawn once into a background image;
    each frame lays the trial's marks over it, which keeps a frame to a few dozen artists.
    ``rows`` (command index -> :class:`BoardRow`), ``keyboard_spot`` and ``pointer_spot`` (centre
    of the hand marker on each device) give the geometry, in pixels from the top left.
    """

    def __init__(self, commands: CommandSet, width: int = FRAME_W, height: int = FRAME_H) -> None:
        from matplotlib.backends.backend_agg import FigureCanvasAgg
        from matplotlib.figure import Figure

        self.commands = commands
        self.width, self.height = int(width), int(height)
        self.figure = Figure(figsize=(self.width / _DPI, self.height / _DPI), dpi=_DPI)
        self.canvas = FigureCanvasAgg(self.figure)
        menus = [np.flatnonzero(commands.menu_of == m) for m in range(len(commands.menu_titles))]
        self._menus = [items[np.argsort(commands.item_index[items], kind="stable")] for items in menus]
        self.rows = self._layout()
        dy = self.height - 135.0
        self.keyboard_spot = (14.0 + 95.0, dy + 31.0)
        self.pointer_spot = (14.0 + 190.0 + 22.0 + 22.0, dy + 37.0)
        self._background = self._render(self._draw_static)

    def draw(self, scene: TrialScene) -> np.ndarray:
        """The frame of ``scene``: uint8 array of shape (height, width, 3)."""
        return self._render(lambda ax: self._draw_scene(ax, scene), self._background)

    # ---- canvas ---------------------------------------------------------------------------------
    def _render(self, paint: Any, background: np.ndarray | None = None) -> np.ndarray:
        fig = self.figure
        fig.clear()
        fig.patch.set_facecolor(_BG)
        if background is not None:
            fig.figimage(background, 0, 0, origin="upper", zorder=0)
        ax = fig.add_axes((0.0, 0.0, 1.0, 1.0))
        ax.patch.set_visible(False)
        ax.set_zorder(1)
        ax.set_xlim(0, self.width)
        ax.set_ylim(self.height, 0)  # y grows downwards, in pixels
        ax.set_axis_off()
        paint(ax)
        self.canvas.draw()
        return np.asarray(self.canvas.buffer_rgba())[..., :3].copy()

    def _layout(self) -> dict[int, BoardRow]:
        n_menus = len(self._menus)
        left, right, top, bottom = 14.0, self.width - 14.0, 52.0, self.height - 150.0
        gap, tab_h = 10.0, 24.0
        col_w = (right - left - gap * (n_menus - 1)) / n_menus
        most = max(len(items) for items in self._menus)
        row_h = min(46.0, (bottom - top - tab_h - 6) / most)
        font = max(5.0, min(9.5, row_h * 0.28, col_w / 22))
        rows: dict[int, BoardRow] = {}
        for m, items in enumerate(self._menus):
            x0 = left + m * (col_w + gap)
            for r, c in enumerate(items):
                y = top + tab_h + 4 + r * row_h
                rows[int(c)] = BoardRow(x0, y, col_w, row_h, font, (x0 + col_w * 0.25, top + tab_h / 2))
        self._tab_h, self._top = tab_h, top
        return rows

    # ---- the board that never changes -------------------------------------------------------
    def _draw_static(self, ax: Any) -> None:
        cmds = self.commands
        for m, items in enumerate(self._menus):
            first = self.rows[int(items[0])]
            x0, w, font = first.x0, first.width, first.font
            ax.add_patch(_rect(x0, self._top, w, self._tab_h, _TAB))
            ax.text(x0 + 8, self._top + self._tab_h / 2, cmds.menu_titles[m], fontsize=font + 1, color=_INK,
                    va="center", ha="left", fontweight="bold")
            ax.add_patch(_rect(x0, first.y - 2, w, first.height * len(items) + 4, _PANEL))
        for c, row in self.rows.items():
            chars = max(4, int((row.width - 20) / (row.font * 0.62)))
            ax.text(*row.item, _fit(cmds.names[c], chars), fontsize=row.font, color=_INK, va="center",
                    ha="left", transform=ax.transData)
            ax.text(row.hotkey[0] + 2, row.hotkey[1], cmds.hotkeys[c], fontsize=row.font * 0.9, color=_DIM,
                    va="center", ha="right", family="monospace")
            bx, by, bw, bh = row.bar
            ax.add_patch(_rect(bx, by, bw, bh, _BAR_BG))
        y0 = self.height - 135.0
        kb_x, kb_w, kb_h = 14.0, 190.0, 62.0
        ax.add_patch(_rect(kb_x, y0, kb_w, kb_h, _PANEL, alpha=0.9))
        for r in range(3):
            for col in range(10):
                ax.add_patch(_rect(kb_x + 8 + col * 17.5, y0 + 8 + r * 17, 14, 13, _TAB))
        ms_x, ms_w = kb_x + kb_w + 22, 44.0
        ax.add_patch(_rect(ms_x, y0 + 4, ms_w, kb_h - 4, _PANEL, alpha=0.9))
        ax.plot([ms_x + ms_w / 2, ms_x + ms_w / 2], [y0 + 4, y0 + 24], color=_DIM, lw=1.2)
        ax.text(kb_x + kb_w / 2, y0 + kb_h + 12, "keyboard", color=_PANEL, fontsize=8, ha="center", va="center")
        ax.text(ms_x + ms_w / 2, y0 + kb_h + 12, "pointer", color=_PANEL, fontsize=8, ha="center", va="center")
        ax.plot([14, self.width - 14], [34 + 3, 34 + 3], color=_DIM, lw=6, alpha=0.5, solid_capstyle="butt")

    # ---- the marks of one trial -----------------------------------------------------------------
    def _draw_scene(self, ax: Any, s: TrialScene) -> None:
        nxt = "done" if s.upcoming is None else f"next: {self.commands.names[s.upcoming]}"
        ax.text(14, 20, f"trial {s.trials_done}/{s.horizon}   session {s.session + 1}/{s.n_sessions}   {nxt}",
                color=_PANEL, fontsize=11, va="center", ha="left", fontweight="bold")
        frac = s.trials_done / max(s.horizon, 1)
        ax.add_patch(_rect(14, 34, (self.width - 28) * frac, 6, _KELP))
        for c, row in self.rows.items():
            bx, by, bw, bh = row.bar
            p = float(np.clip(s.recall[c], 0.0, 1.0))
            ax.add_patch(_rect(bx, by, bw * p, bh, _BAR, zorder=4))
            ax.text(bx + bw + 6, by + bh / 2, f"{p:.2f}", fontsize=row.font * 0.85, color=_DIM, va="center",
                    ha="left")
        if s.upcoming is not None:
            row = self.rows[s.upcoming]
            ax.add_patch(_rect(row.x0 + 4, row.y + 2, row.width - 8, row.height - 4, "none", edge=_CORAL, lw=1.6,
                               ls=(0, (4, 2))))
        if s.hand_before_keyboard is not None and s.hand_before_keyboard != s.hand_on_keyboard:
            was = self.keyboard_spot if s.hand_before_keyboard else self.pointer_spot
            ax.add_patch(_circle(was, 9, "none", edge=_CORAL, lw=1.4, ls=(0, (2, 2))))
        now = self.keyboard_spot if s.hand_on_keyboard else self.pointer_spot
        ax.add_patch(_circle(now, 10, _CORAL, edge=_BG, lw=1.5))
        ax.text(now[0], self.height - 144.0, "hand", fontsize=8, color=_CORAL, ha="center", va="center",
                fontweight="bold")
        if s.last_command is None or s.last_action is None:
            ax.text(300, self.height - 127, "no trial yet", color=_PANEL, fontsize=10, va="center")
            return
        row = self.rows[s.last_command]
        colour = _OUTCOME_COLOURS.get(s.last_outcome or "", _CORAL)
        ax.add_patch(_rect(row.x0 + 2, row.y, row.width - 4, row.height, colour, alpha=0.18))
        ax.add_patch(_rect(row.x0 + 2, row.y, row.width - 4, row.height, "none", edge=colour, lw=2.0))
        self._path(ax, s, row, colour)
        self._time_strip(ax, s, colour)

    def _path(self, ax: Any, s: TrialScene, row: BoardRow, colour: str) -> None:
        drop_x = row.x0 + 5  # left margin of the column, clear of the bars
        menu_path = [self.pointer_spot, (drop_x, row.tab[1]), (drop_x, row.item[1]), (row.item[0] + 4, row.item[1])]
        if s.last_action == k.HOTKEY:
            ax.annotate("", xy=row.hotkey, xytext=self.keyboard_spot,
                        arrowprops={"arrowstyle": "-|>", "color": colour, "lw": 2.0, "shrinkB": 6})
            if s.last_outcome != "hotkey":  # failed recall or wrong command: cross, then the menu
                x, y = row.hotkey
                ax.plot([x - 7, x + 7], [y - 7, y + 7], color=_FAIL, lw=2.5)
                ax.plot([x - 7, x + 7], [y + 7, y - 7], color=_FAIL, lw=2.5)
                _polyline(ax, menu_path, colour, dashed=True)
        else:
            _polyline(ax, menu_path, colour, dashed=False)
            if s.last_action == k.LEARN:  # the eye goes from the item to its hotkey label
                ax.annotate("", xy=row.hotkey, xytext=(row.item[0] + 40, row.item[1]),
                            arrowprops={"arrowstyle": "-|>", "color": _CORAL, "lw": 1.4, "ls": ":"})

    def _time_strip(self, ax: Any, s: TrialScene, colour: str) -> None:
        """Last trial's verdict and its time split by operator (one stacked bar)."""
        x0, y0 = 300.0, self.height - 135.0
        width = self.width - x0 - 14
        name = self.commands.names[s.last_command or 0]
        ax.text(x0, y0 + 8, f"{_fit(name, 34)}: {k.ACTION_NAMES[s.last_action]} -> {s.last_outcome}",  # type: ignore[index]
                color=colour, fontsize=9.5, va="center", fontweight="bold")
        ax.text(x0, y0 + 26, f"{s.last_duration_s:.2f} s    p(recall) at the trial {s.last_p_recall:.2f}",
                color=_PANEL, fontsize=8.5, va="center")
        total = max(sum(s.last_time_s.values()), 1e-12)
        x, lx, ly = x0, x0, y0 + 70
        for i, op in enumerate(k.OPERATOR_NAMES):
            v = s.last_time_s.get(op, 0.0)
            if v <= 0.0:
                continue
            seg = width * v / total
            op_colour = _OP_COLOURS[i % len(_OP_COLOURS)]
            ax.add_patch(_rect(x, y0 + 40, seg, 16, op_colour))
            x += seg
            label = f"{op} {v:.2f}"
            step = 24 + 5.4 * len(label)
            if lx + step > x0 + width:
                lx, ly = x0, ly + 15
            ax.add_patch(_rect(lx, ly - 5, 10, 10, op_colour))
            ax.text(lx + 14, ly, label, color=_PANEL, fontsize=7.5, va="center")
            lx += step
        ax.text(x0 + width, y0 + 26, "time by operator (s)", color=_DIM, fontsize=7.5, va="center", ha="right")


def _fit(text: str, chars: int) -> str:
    """``text`` cut to ``chars`` characters with an ellipsis."""
    return text if len(text) <= chars else text[: max(chars - 1, 1)] + "\u2026"


def _rect(x: float, y: float, w: float, h: float, face: str, edge: str = "none", lw: float = 0.0,
          alpha: float = 1.0, ls: Any = "solid", zorder: float = 1.0) -> Any:
    from matplotlib.patches import Rectangle

    return Rectangle((x, y), max(w, 0.0), h, facecolor=face, edgecolor=edge, linewidth=lw, alpha=alpha,
                     linestyle=ls, zorder=zorder)


def _circle(xy: tuple[float, float], r: float, face: str, edge: str = "none", lw: float = 0.0,
            ls: Any = "solid") -> Any:
    from matplotlib.patches import Circle

    return Circle(xy, r, facecolor=face, edgecolor=edge, linewidth=lw, linestyle=ls)


def _polyline(ax: Any, points: list[tuple[float, float]], colour: str, dashed: bool) -> None:
    """The pointer's travel to the first point faint, then the path to the last point with an arrow."""
    ls = "--" if dashed else "-"
    (x0, y0), (x1, y1) = points[0], points[1]
    ax.plot([x0, x1], [y0, y1], color=_DIM, lw=1.2, ls=":", alpha=0.8)
    xs, ys = zip(*points[1:-1])
    ax.plot(xs, ys, color=colour, lw=2.0, ls=ls, solid_capstyle="round")
    ax.annotate("", xy=points[-1], xytext=points[-2],
                arrowprops={"arrowstyle": "-|>", "color": colour, "lw": 2.0, "ls": "--" if dashed else "-"})
