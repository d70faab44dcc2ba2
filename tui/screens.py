"""Screens over the main view: loading, error, help, limits, note, delete, export."""

from __future__ import annotations

import math
from pathlib import Path

from rich.text import Text
from textual.app import ComposeResult
from textual.binding import Binding
from textual.containers import Horizontal, Vertical, VerticalScroll
from textual.screen import ModalScreen, Screen
from textual.widgets import Input, Label, LoadingIndicator, ProgressBar, Select, Static

from survey.design import CAUTION, PRESETS, Limits, preset_limits

#: Load stages shown by the progress bar.
STAGES = ("reading and cleaning the log", "smoothing the path and computing the geometry", "reading hand marks", "flagging sections and preparing the charts")


class LoadingScreen(Screen):
    """Progress while the log is read and the geometry computed (all off the event loop)."""

    DEFAULT_CSS = """
    LoadingScreen { align: center middle; }
    LoadingScreen > Vertical { width: 70; max-width: 95%; height: auto; border: round $accent; padding: 1 2; }
    LoadingScreen LoadingIndicator { height: 1; }
    """
    BINDINGS = [Binding("q", "app.quit", "quit")]

    def __init__(self, name_text: str):
        super().__init__()
        self.name_text = name_text

    def compose(self) -> ComposeResult:
        with Vertical():
            yield Label(Text(f"opening {self.name_text}"))
            yield ProgressBar(total=len(STAGES), show_eta=False, id="progress")
            yield Label("starting", id="stage")
            yield LoadingIndicator()
            yield Label("q quits", classes="hint")

    def set_stage(self, k: int, text: str | None = None) -> None:
        self.query_one("#progress", ProgressBar).update(progress=k)
        self.query_one("#stage", Label).update(Text(f"step {k + 1} of {len(STAGES)}: {text or STAGES[k]}"))


class ErrorScreen(Screen):
    """A log that cannot be shown: its one-line reason, and how to leave."""

    DEFAULT_CSS = """
    ErrorScreen { align: center middle; }
    ErrorScreen > Vertical { width: 90%; height: auto; border: heavy $error; padding: 1 2; }
    """
    BINDINGS = [Binding("q,escape,enter", "app.quit", "quit")]

    def __init__(self, message: str):
        super().__init__()
        self.message = message

    def compose(self) -> ComposeResult:
        with Vertical():
            yield Label("cannot open this log", id="title")
            yield Static(Text(self.message), id="message")
            yield Label("press q to quit")


class HelpScreen(ModalScreen):
    """Every key, generated from the app's bindings, plus the glyph legend, the caution and the
    notes the profile carries (what the log could not tell, what was left out)."""

    DEFAULT_CSS = """
    HelpScreen { align: center middle; }
    HelpScreen > VerticalScroll { width: 90%; height: 90%; border: round $accent; padding: 0 1; }
    """
    BINDINGS = [Binding("escape,q,question_mark,f1", "dismiss", "close")]

    def __init__(self, keys: list[tuple[str, str]], notes: tuple[str, ...] | list[str] = ()):
        super().__init__()
        self.keys = keys
        self.notes = list(notes)

    def compose(self) -> ComposeResult:
        lines = []
        if self.notes:
            lines += ["NOTES ON THIS PROFILE"] + [f"  - {n}" for n in self.notes] + [""]
        lines += ["KEYS"]
        width = max(len(k) for k, _ in self.keys)
        lines += [f"  {k.ljust(width)}  {d}" for k, d in self.keys]
        lines += [
            "",
            "CHARTS",
            "  █ ▀ ▄  smallest..largest value of the stations in a column",
            "  ░      ±1 standard deviation band",
            "  ·      no value here (torsion is undefined where the path is straight)",
            "  ─      zero;  ┄ the active limit",
            "  │ ▲    cursor",
            "FLAG LANE",
            "  S sharp (radius below limit)   T twisting (|torsion| above limit)",
            "  D below the design-speed radius   M your mark   m an open mark",
            "PLAN",
            "  braille dots = track, bold = flagged or marked, ○ start, ● cursor, labels = section ids",
            "",
            "DESIGN SPEED",
            "  " + CAUTION,
            "",
            "escape closes this help",
        ]
        with VerticalScroll():
            yield Static(Text("\n".join(lines)), id="help-text")


class ConfirmScreen(ModalScreen[bool]):
    """Yes/no question; y confirms, n or escape declines."""

    DEFAULT_CSS = """
    ConfirmScreen { align: center middle; }
    ConfirmScreen > Vertical { width: 60; max-width: 95%; height: auto; border: heavy $warning; padding: 1 2; }
    """
    BINDINGS = [Binding("y", "answer(True)", "yes"), Binding("n,escape", "answer(False)", "no")]

    def __init__(self, question: str):
        super().__init__()
        self.question = question

    def compose(self) -> ComposeResult:
        with Vertical():
            yield Static(Text(self.question))
            yield Label("y = yes   n = no")

    def action_answer(self, yes: bool) -> None:
        self.dismiss(yes)


class NoteScreen(ModalScreen[str | None]):
    """Edit a mark's note: Enter saves, Escape cancels."""

    DEFAULT_CSS = """
    NoteScreen { align: center middle; }
    NoteScreen > Vertical { width: 70; max-width: 95%; height: auto; border: round $accent; padding: 1 2; }
    """
    BINDINGS = [Binding("escape", "cancel", "cancel")]

    def __init__(self, title: str, note: str):
        super().__init__()
        self.title_text = title
        self.note = note

    def compose(self) -> ComposeResult:
        with Vertical():
            yield Label(Text(self.title_text))
            yield Input(value=self.note, placeholder="note (e.g. washout, loose rock)", id="note", compact=True)
            yield Label("enter = save   escape = cancel")

    def on_input_submitted(self, event: Input.Submitted) -> None:
        self.dismiss(event.value)

    def action_cancel(self) -> None:
        self.dismiss(None)


def _num(text: str) -> float | None:
    t = text.strip()
    if not t or t.lower() in ("off", "none", "-"):
        return None
    return float(t)


#: Limit fields of the limits screen: (Limits attribute, label, placeholder).
LIMIT_FIELDS = (
    ("sharp_radius_m", "sharp: radius below (m)", "off"),
    ("twist_per_m", "twisting: |torsion| above (1/m)", "off"),
    ("design_speed_kmh", "design speed (km/h)", "off"),
    ("superelevation", "superelevation e (decimal)", "default 0.08"),
    ("friction", "side friction f (decimal)", "by speed"),
    ("min_length_m", "shortest section (m)", "5"),
    ("merge_gap_m", "merge sections closer than (m)", "10"),
)


class LimitsScreen(ModalScreen[Limits | None]):
    """Change the limits; the flags on the main screen follow as you type (valid values only)."""

    DEFAULT_CSS = """
    LimitsScreen { align: center middle; }
    LimitsScreen > VerticalScroll { width: 78; max-width: 98%; height: auto; max-height: 95%; border: round $accent; padding: 0 1; }
    LimitsScreen .row { height: 1; }
    LimitsScreen .row Label { width: 34; }
    LimitsScreen .row Input { width: 1fr; }
    #limits-error { color: $error; height: auto; }
    #preset { margin-bottom: 1; }
    """
    BINDINGS = [Binding("escape", "close", "close"), Binding("ctrl+r", "revert", "undo changes")]

    def __init__(self, limits: Limits, on_change):
        super().__init__()
        self.original = limits
        self.current = limits
        self.on_change = on_change

    def compose(self) -> ComposeResult:
        with VerticalScroll():
            yield Label("LIMITS (flags update as you type; empty = check off; escape closes)")
            yield Select([(f"{p.name}: {p.summary}", p.name) for p in PRESETS.values()], prompt="start from a preset…",
                         id="preset", compact=True)
            for attr, label, placeholder in LIMIT_FIELDS:
                value = getattr(self.original, attr)
                with Horizontal(classes="row"):
                    yield Label(label)
                    yield Input(value="" if value is None else f"{value:g}", placeholder=placeholder, id=f"lim-{attr}", compact=True)
            yield Static("", id="limits-error")
            yield Static(Text(f"Design-speed figures: {CAUTION}"), id="caution")

    def on_mount(self) -> None:
        self.query_one(f"#lim-{LIMIT_FIELDS[0][0]}", Input).focus()

    def _read(self) -> Limits:
        values = {}
        for attr, label, _ in LIMIT_FIELDS:
            text = self.query_one(f"#lim-{attr}", Input).value
            try:
                v = _num(text)
            except ValueError:
                raise ValueError(f"{label}: not a number: {text!r}") from None
            if v is not None and not math.isfinite(v):
                raise ValueError(f"{label}: must be finite")
            values[attr] = v
        for attr in ("min_length_m", "merge_gap_m"):
            if values[attr] is None:
                values[attr] = getattr(Limits(), attr)
        keep = {k: getattr(self.original, k) for k in ("hysteresis", "confidence_sigma")}
        if (values["superelevation"] is not None or values["friction"] is not None) and values["design_speed_kmh"] is None:
            raise ValueError("e and f need a design speed")
        return Limits(**values, **keep)

    def on_input_changed(self, event: Input.Changed) -> None:
        err = self.query_one("#limits-error", Static)
        try:
            limits = self._read()
        except ValueError as exc:
            err.update(Text(str(exc)))
            return
        err.update("")
        if limits != self.current:
            self.current = limits
            self.on_change(limits)

    def on_select_changed(self, event: Select.Changed) -> None:
        if event.value is Select.BLANK or event.value is None:
            return
        lim = preset_limits(str(event.value))
        for attr, _, _ in LIMIT_FIELDS:
            v = getattr(lim, attr)
            self.query_one(f"#lim-{attr}", Input).value = "" if v is None else f"{v:g}"

    def action_revert(self) -> None:
        for attr, _, _ in LIMIT_FIELDS:
            v = getattr(self.original, attr)
            self.query_one(f"#lim-{attr}", Input).value = "" if v is None else f"{v:g}"

    def action_close(self) -> None:
        self.dismiss(self.current)


#: Export formats: (extension, description).
EXPORT_FORMATS = (
    (".csv", "CSV: the section table"),
    (".xlsx", "Excel: sections, every station, run settings"),
    (".geojson", "GeoJSON: one line per section (WGS 84)"),
    (".gpx", "GPX: one track per section"),
)


class ExportScreen(ModalScreen[tuple[str, bool] | None]):
    """Choose a format and a file name; Enter writes (via survey.export), Escape cancels."""

    DEFAULT_CSS = """
    ExportScreen { align: center middle; }
    ExportScreen > Vertical { width: 78; max-width: 98%; height: auto; border: round $accent; padding: 1 2; }
    #export-error { color: $error; }
    """
    BINDINGS = [Binding("escape", "cancel", "cancel"), Binding("ctrl+o", "toggle_force", "overwrite on/off")]

    def __init__(self, default_path: str, count: int):
        super().__init__()
        self.default_path = default_path
        self.count = count
        self.force = False

    def compose(self) -> ComposeResult:
        with Vertical():
            yield Label(f"EXPORT {self.count} section(s) with your marks")
            yield Select([(d, ext) for ext, d in EXPORT_FORMATS], value=Path(self.default_path).suffix or ".csv",
                         allow_blank=False, id="format", compact=True)
            yield Label("file (the extension picks the format):")
            yield Input(value=self.default_path, id="path", compact=True)
            yield Static("overwrite an existing file: no (ctrl+o changes)", id="force")
            yield Static("", id="export-error")
            yield Label("enter = write   escape = cancel")

    def on_mount(self) -> None:
        self.query_one("#path", Input).focus()

    def on_select_changed(self, event: Select.Changed) -> None:
        inp = self.query_one("#path", Input)
        p = Path(inp.value or self.default_path)
        if p.suffix.lower() != event.value:
            inp.value = str(p.with_suffix(str(event.value)))

    def action_toggle_force(self) -> None:
        self.force = not self.force
        self.query_one("#force", Static).update(f"overwrite an existing file: {'YES' if self.force else 'no'} (ctrl+o changes)")

    def on_input_submitted(self, event: Input.Submitted) -> None:
        from survey.errors import InputError
        from survey.export import export_format

        path = event.value.strip()
        try:
            if not path or path == "-":
                raise InputError(None, "give a file name")
            export_format(path)
        except InputError as exc:
            self.query_one("#export-error", Static).update(Text(str(exc)))
            return
        self.dismiss((path, self.force))

    def action_cancel(self) -> None:
        self.dismiss(None)
