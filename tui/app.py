"""The trackframe viewer: one log, its geometry along the chainage, sections, marks, export.

Data flow: a worker thread runs the shared pipeline (``survey.pipeline``) and builds the
``ViewModel``; key handlers change the model and refresh the widgets; the widgets draw from the
model with cached pictures. Marks are saved to the sidecar inside the key handler (``MarkStore``
writes atomically before returning). Slow work (loading, re-flagging with new limits, export)
runs in thread workers so the screen never freezes.
"""

from __future__ import annotations

import time
from pathlib import Path

from rich.text import Text
from textual.app import App, ComposeResult
from textual.binding import Binding
from textual.containers import Horizontal, Vertical
from textual.widgets import Footer, OptionList, Static

from survey.design import Limits
from survey.errors import InputError
from survey.sections import detect_sections

from . import fmt
from .model import ViewModel
from .screens import ConfirmScreen, ErrorScreen, ExportScreen, HelpScreen, LimitsScreen, LoadingScreen, NoteScreen
from .widgets import ChartPanel, PlanView, Readout, SectionList

#: Limits used when the caller gives none: a general-purpose starting point (our own values).
DEFAULT_LIMITS = Limits(sharp_radius_m=15.0, twist_per_m=0.05)


def limits_text(lim: Limits) -> str:
    """Compact description of the active limits for the header line."""
    parts = []
    if lim.sharp_radius_m:
        parts.append(f"R<{fmt.short(lim.sharp_radius_m)} m")
    if lim.twist_per_m:
        parts.append(f"|τ|>{fmt.short(lim.twist_per_m)}/m")
    if lim.design_on:
        parts.append(f"{lim.design_speed_kmh:g} km/h: plan R<{lim.design_radius_m:.0f} m (advisory)")
    return ", ".join(parts) if parts else "no limits (l sets them)"


class TrackApp(App):
    """Viewer for one log. Give ``log_path`` (loaded in a worker) or a ready ``profile``."""

    TITLE = "trackframe"
    ENABLE_COMMAND_PALETTE = False
    CSS = """
    Screen { layout: vertical; }
    #header { height: auto; max-height: 2; background: $boost; text-style: bold; }
    #body { height: 1fr; }
    #left { width: 1fr; }
    #right { width: 34; border-left: vkey $surface-lighten-2; }
    #sections { height: 5; }
    #sections-title { height: 1; background: $boost; }
    #status { height: 1; background: $boost; }
    """

    BINDINGS = [
        Binding("right", "step(1)", "move", key_display="←→"),
        Binding("left", "step(-1)", "step back", show=False),
        Binding("pagedown,rightsquarebracket", "page(1)", "page", show=False),
        Binding("pageup,leftsquarebracket", "page(-1)", "page back", show=False),
        Binding("home,less_than_sign", "home", "start", show=False),
        Binding("end,greater_than_sign", "end", "end", show=False),
        Binding("plus,equals_sign", "zoom_in", "zoom", key_display="+-"),
        Binding("minus", "zoom_out", "zoom out", show=False),
        Binding("n", "next_section", "next flag", key_display="n/p"),
        Binding("p", "previous_section", "prev flag", show=False),
        Binding("m", "mark", "mark"),
        Binding("t", "note", "note", show=False),
        Binding("d", "delete_mark", "delete mark", show=False),
        Binding("escape", "cancel_mark", "cancel mark", show=False),
        Binding("l", "limits", "limits"),
        Binding("x", "export", "export"),
        Binding("r", "toggle_radius", "curv./radius", show=False),
        Binding("v", "toggle_plan", "plan zoom", show=False),
        Binding("s", "focus_sections", "section list", show=False),
        Binding("question_mark,f1", "help", "help", key_display="?"),
        Binding("q", "quit", "quit"),
    ]

    #: Key descriptions for the help screen (every binding above, in words).
    HELP_KEYS = [
        ("→ / ←", "move the cursor one station along / back"),
        ("PgDn / PgUp  or ] / [", "move one window width"),
        ("Home / End  or < / >", "jump to the start / end"),
        ("+ or =  /  -", "zoom the chainage window in / out (mouse wheel too)"),
        ("n / p", "next / previous flagged section"),
        ("m", "start a mark at the cursor; press again to end it (saved at once)"),
        ("escape", "cancel an open mark"),
        ("t", "add or edit the note of the mark under the cursor"),
        ("d", "delete the mark under the cursor (asks first)"),
        ("l", "change the limits (flags update as you type)"),
        ("x", "export sections and marks (CSV, Excel, GeoJSON, GPX)"),
        ("r", "switch the top chart between curvature and radius"),
        ("v", "plan view: whole track / follow the chainage window"),
        ("s or tab", "go to the section list (↑ ↓ choose, enter jumps, escape back)"),
        ("click", "put the cursor on a chart column / jump to a listed section"),
        ("? or F1", "this help, with the profile's notes"),
        ("q", "quit"),
    ]

    def __init__(
        self,
        log_path: str | None = None,
        load_kwargs: dict | None = None,
        step_m: float = 1.0,
        limits: Limits | None = None,
        profile=None,
        frame_text: str = "",
        marks: bool = True,
    ):
        super().__init__()
        if log_path is None and profile is None:
            raise ValueError("give a log path or a profile")
        self.log_path = log_path
        self.load_kwargs = dict(load_kwargs or {})
        self.step_m = step_m
        self.initial_limits = limits or DEFAULT_LIMITS
        self.given_profile = profile
        self.frame_text = frame_text
        self.use_marks = marks
        self.model: ViewModel | None = None
        self.error: str | None = None
        self.timings: dict[str, float] = {}
        self._t_start = time.perf_counter()
        self._limits_job = 0

    # -- layout --------------------------------------------------------------------------------

    def compose(self) -> ComposeResult:
        yield Static("", id="header")
        with Horizontal(id="body"):
            with Vertical(id="left"):
                yield ChartPanel(id="charts")
                yield Static("sections", id="sections-title")
                yield SectionList(id="sections")
            with Vertical(id="right"):
                yield PlanView(id="plan")
                yield Readout(id="readout")
        yield Static("", id="status")
        yield Footer(compact=True)

    def on_mount(self) -> None:
        self.timings["mount_s"] = time.perf_counter() - self._t_start
        self._fit_layout()
        name = Path(self.log_path).name if self.log_path else "profile"
        self.push_screen(LoadingScreen(name))
        self.run_worker(self._load, thread=True, exclusive=True, group="load", exit_on_error=False)

    def on_resize(self, event) -> None:
        self._fit_layout()

    def _fit_layout(self) -> None:
        """Share the space: wider right pane and longer list on big terminals."""
        w, h = self.size.width, self.size.height
        try:
            right = self.query_one("#right")
            sections = self.query_one("#sections")
        except Exception:
            return
        right.styles.width = 34 if w < 110 else min(48, w // 3)
        sections.styles.height = 5 if h < 34 else min(12, h // 4)

    # -- loading (worker thread) ---------------------------------------------------------------

    def _stage(self, k: int, text: str | None = None) -> None:
        screen = self.screen
        if isinstance(screen, LoadingScreen):
            screen.set_stage(k, text)

    def _load(self) -> None:
        """Read, compute and build the view model; runs in a thread."""
        try:
            model = self._build_model()
        except InputError as exc:
            self.call_from_thread(self._show_error, str(exc))
            return
        except MemoryError:
            self.call_from_thread(self._show_error, f"{self.log_path}: not enough memory for this log")
            return
        except Exception as exc:  # a bug must still not leave a traceback on the user's terminal
            self.call_from_thread(self._show_error, f"{self.log_path or 'profile'}: unexpected error: {type(exc).__name__}: {exc}")
            return
        self.call_from_thread(self._on_model_ready, model)

    def _build_model(self) -> ViewModel:
        from survey.marks import MarkStore

        warnings: list[str] = []
        frame_text = self.frame_text
        if self.given_profile is not None:
            profile = self.given_profile
        else:
            from survey.pipeline import compute_profile, load_log

            self.call_from_thread(self._stage, 0)
            read_kwargs = {k: v for k, v in self.load_kwargs.items() if not k.startswith("imu")}
            imu_kwargs = {k: v for k, v in self.load_kwargs.items() if k.startswith("imu")}
            loaded = load_log(self.log_path, **read_kwargs)
            self.call_from_thread(self._stage, 1, f"{STAGE_GEOMETRY} ({len(loaded.track)} fixes)")
            profile = compute_profile(loaded, step_m=self.step_m, **imu_kwargs)
            frame_text = short_frame(loaded.frame)
        self.timings["geometry_ready_s"] = time.perf_counter() - self._t_start
        self._t_geometry = time.perf_counter()
        if len(profile) < 2:
            why = "; ".join(getattr(profile, "messages", ()) or ())
            raise InputError(self.log_path, f"the log gives fewer than two stations; nothing to draw{': ' + why if why else ''}")
        store = None
        if self.use_marks and self.log_path:
            self.call_from_thread(self._stage, 2)
            try:
                store = MarkStore.load(self.log_path)
            except InputError as exc:
                warnings.append(f"marks unavailable: {exc}")
            else:
                warnings.extend(store.warnings)
        self.call_from_thread(self._stage, 3)
        model = ViewModel(
            profile,
            self.initial_limits,
            marks=store,
            log_name=Path(self.log_path).name if self.log_path else "profile",
            frame_text=frame_text or profile.frame[:30],
        )
        model.warnings = warnings
        self.timings["model_built_s"] = time.perf_counter() - self._t_start
        return model

    def _show_error(self, message: str) -> None:
        self.error = message
        self.switch_screen(ErrorScreen(message))

    def _on_model_ready(self, model: ViewModel) -> None:
        self.timings["model_on_screen_s"] = time.perf_counter() - self._t_start
        self.model = model
        if isinstance(self.screen, LoadingScreen):
            self.pop_screen()
        self._sections_changed()
        self.query_one("#charts").focus()
        notes = len(self._notes())
        if getattr(model, "warnings", None):
            self.set_status(" · ".join(model.warnings))
        elif notes:
            self.set_status(f"ready: {notes} note{'s' if notes > 1 else ''} on this profile, shown with every key (?)")
        else:
            self.set_status("ready: ? lists every key")
        self.call_after_refresh(self._first_paint)

    def _first_paint(self) -> None:
        self.timings["first_paint_s"] = time.perf_counter() - self._t_start
        if hasattr(self, "_t_geometry"):
            self.timings["first_screen_after_geometry_s"] = time.perf_counter() - self._t_geometry

    # -- refresh helpers -----------------------------------------------------------------------

    def set_status(self, text: str) -> None:
        # Text, not markup: messages may hold file names and notes with brackets
        self.query_one("#status", Static).update(Text(text, no_wrap=True, overflow="ellipsis"))

    def _header(self) -> None:
        m = self.model
        parts = [m.log_name, f"{fmt.chainage(m.length_m())}", fmt.duration(m.duration_s()), m.frame_text, limits_text(m.limits)]
        self.query_one("#header", Static).update(Text(" │ ".join(p for p in parts if p)))

    def _moved(self) -> None:
        """Refresh what a cursor move changes (the widgets redraw only their cursor layer unless
        the window moved)."""
        self.query_one(ChartPanel).note_move()
        self.query_one(PlanView).note_move()
        self.query_one(Readout).refresh()

    def _sections_changed(self) -> None:
        secs = self.model.sections
        self.query_one(SectionList).show(secs)
        n_auto = len(self.model.auto_sections)
        self.query_one("#sections-title", Static).update(
            f"sections: {n_auto} flagged, {len(secs) - n_auto} marked (s, enter)")
        self._header()
        self.query_one(ChartPanel).refresh()
        self.query_one(PlanView).refresh()
        self.query_one(Readout).refresh(layout=True)

    # -- cursor actions ------------------------------------------------------------------------

    def goto_station(self, index: int) -> None:
        if self.model is None:
            return
        self.model.goto(index)
        self._moved()

    def action_step(self, stations: int) -> None:
        if self.model is None:
            return
        self.model.step(stations)
        self._moved()

    def action_page(self, direction: int) -> None:
        if self.model is None:
            return
        self.model.page(direction)
        self._moved()

    def action_home(self) -> None:
        if self.model is not None:
            self.model.home()
            self._moved()

    def action_end(self) -> None:
        if self.model is not None:
            self.model.end()
            self._moved()

    def action_zoom_in(self) -> None:
        if self.model is not None:
            self.model.zoom(0.5)
            self._moved()
            self._say_window()

    def action_zoom_out(self) -> None:
        if self.model is not None:
            self.model.zoom(2.0)
            self._moved()
            self._say_window()

    def _say_window(self) -> None:
        a, b = self.model.window_chainage
        cols = self.query_one(ChartPanel).plot_columns()
        per = (b - a) / max(cols, 1)
        self.set_status(f"window {fmt.chainage(a)} – {fmt.chainage(b)} ({per:.3g} m per column)")

    def action_next_section(self) -> None:
        self._walk(self.model.next_section if self.model else None, "no further flagged section")

    def action_previous_section(self) -> None:
        self._walk(self.model.previous_section if self.model else None, "no earlier flagged section")

    def _walk(self, fn, none_text: str) -> None:
        if fn is None:
            return
        sec = fn()
        if sec is None:
            self.set_status(none_text)
            return
        self._moved()
        if sec.kind == "design":
            lim = self.model.limits
            self.set_status(
                f"{sec.id} (advisory: codes and a licensed engineer decide) plan R {sec.note.split('down to ')[-1].split(',')[0]}"
                f" < {lim.design_radius_m:.0f} m for {lim.design_speed_kmh:g} km/h; e+f used up at {sec.balance_speed_kmh:.0f} km/h"
            )
        else:
            self.set_status(f"{sec.id}: {sec.note}")

    def action_toggle_radius(self) -> None:
        charts = self.query_one(ChartPanel)
        charts.radius_mode = not charts.radius_mode
        charts.refresh()

    def action_toggle_plan(self) -> None:
        plan = self.query_one(PlanView)
        plan.follow = not plan.follow
        plan.refresh()

    def action_focus_sections(self) -> None:
        self.query_one(SectionList).focus()

    def on_option_list_option_selected(self, event: OptionList.OptionSelected) -> None:
        lst = self.query_one(SectionList)
        if event.option_list is not lst or self.model is None or event.option_index >= len(lst.sections):
            return
        sec = lst.sections[event.option_index]
        self.model.jump_to(sec)
        self._moved()
        self.set_status(f"{sec.id} {sec.kind}: {fmt.chainage(sec.start_chainage_m)} – {fmt.chainage(sec.end_chainage_m)}")

    # -- marks ---------------------------------------------------------------------------------

    def _need_marks(self) -> bool:
        if self.model is None:
            return False
        if self.model.store is None:
            self.set_status("marks are not available for this log")
            return False
        return True

    def action_mark(self) -> None:
        if not self._need_marks():
            return
        try:
            what, mark = self.model.mark_here()
        except InputError as exc:
            self.set_status(f"mark not saved: {exc}")
            return
        if what == "opened":
            self.set_status(f"mark opened at {fmt.chainage_exact(self.model.pending_mark_m)}: move, then m again to end it (escape cancels)")
            self._moved()
        else:
            self._sections_changed()
            self.set_status(f"M{mark.id} saved: {fmt.chainage_exact(mark.start_m)} – {fmt.chainage_exact(mark.end_m)} (t adds a note)")

    def action_cancel_mark(self) -> None:
        if self.model is not None and self.model.cancel_mark():
            self.set_status("open mark cancelled")
            self._moved()
        elif self.focused is self.query_one(SectionList):
            self.query_one(ChartPanel).focus()

    def action_note(self) -> None:
        if not self._need_marks():
            return
        mark = self.model.mark_at_cursor()
        if mark is None:
            self.set_status("no mark under the cursor (m starts one)")
            return

        def done(note: str | None) -> None:
            if note is None:
                return
            try:
                self.model.set_note(mark.id, note)
            except InputError as exc:
                self.set_status(f"note not saved: {exc}")
                return
            self._sections_changed()
            self.set_status(f"M{mark.id} note saved")

        self.push_screen(NoteScreen(f"note for M{mark.id} ({fmt.chainage(mark.start_m)} – {fmt.chainage(mark.end_m)})", mark.note), done)

    def action_delete_mark(self) -> None:
        if not self._need_marks():
            return
        mark = self.model.mark_at_cursor()
        if mark is None:
            self.set_status("no mark under the cursor")
            return

        def done(yes: bool | None) -> None:
            if not yes:
                self.set_status("kept")
                return
            try:
                self.model.delete_mark(mark.id)
            except InputError as exc:
                self.set_status(f"not deleted: {exc}")
                return
            self._sections_changed()
            self.set_status(f"M{mark.id} deleted")

        self.push_screen(
            ConfirmScreen(f"Delete mark M{mark.id} ({fmt.chainage_exact(mark.start_m)} – {fmt.chainage_exact(mark.end_m)}"
                          f"{', ' + repr(mark.note) if mark.note else ''})?"),
            done,
        )

    # -- limits --------------------------------------------------------------------------------

    def action_limits(self) -> None:
        if self.model is None:
            return
        self.push_screen(LimitsScreen(self.model.limits, self.preview_limits), self._limits_closed)

    def _limits_closed(self, limits: Limits | None) -> None:
        if limits is not None and self.model is not None and limits != self.model.limits:
            self.preview_limits(limits)

    def preview_limits(self, limits: Limits) -> None:
        """Re-flag with new limits in a worker; the newest request wins."""
        self._limits_job += 1
        job = self._limits_job
        profile = self.model.profile
        self.set_status("re-flagging…")

        def work() -> None:
            try:
                auto = detect_sections(profile, limits)
            except Exception as exc:  # bad limits never crash the viewer
                self.call_from_thread(self.set_status, f"limits not applied: {exc}")
                return
            self.call_from_thread(self._apply_limits, job, limits, auto)

        self.run_worker(work, thread=True, group="limits", exit_on_error=False)

    def _apply_limits(self, job: int, limits: Limits, auto) -> None:
        if job != self._limits_job or self.model is None:
            return
        self.model.set_limits(limits, auto)
        self._sections_changed()
        self.set_status(f"{len(auto)} flagged section(s) with {limits_text(limits)}")

    # -- export --------------------------------------------------------------------------------

    def default_export_path(self) -> str:
        if self.log_path:
            p = Path(self.log_path)
            return str(p.with_name(p.stem + ".findings.csv"))
        return "findings.csv"

    def action_export(self) -> None:
        if self.model is None:
            return
        self.push_screen(ExportScreen(self.default_export_path(), len(self.model.sections)), self._export_chosen)

    def _export_chosen(self, choice) -> None:
        if choice is None:
            return
        path, force = choice
        self.export_to(path, force)

    def export_to(self, path: str, force: bool = False) -> None:
        """Write the current sections (and marks) with survey.export in a worker thread."""
        from survey.export import RunInfo, write_findings
        from survey.marks import file_sha256

        m = self.model
        sections = list(m.sections)
        self.set_status(f"writing {path}…")

        def work() -> None:
            try:
                sha = m.store.log_sha256 if m.store is not None else (file_sha256(self.log_path)[0] if self.log_path else "")
                run = RunInfo(
                    input_path=str(self.log_path or ""),
                    input_sha256=sha,
                    frame=m.profile.frame or m.frame_text,
                    limits=m.limits.as_dict(),
                    settings={"step_m": m.profile.step_m, "marks": str(m.store.path) if m.store is not None else "none",
                              "made_with": "trackframe view"},
                )
                fmt_name = write_findings(path, sections, m.profile, run, force=force)
            except InputError as exc:
                self.call_from_thread(self.set_status, f"export failed: {exc}")
                return
            except Exception as exc:
                self.call_from_thread(self.set_status, f"export failed: {type(exc).__name__}: {exc}")
                return
            self.call_from_thread(self.set_status, f"wrote {len(sections)} section(s) to {path} ({fmt_name})")

        self.run_worker(work, thread=True, group="export", exit_on_error=False)

    # -- help ----------------------------------------------------------------------------------

    def _notes(self) -> tuple[str, ...]:
        """The profile's notes (``Profile.messages``): what the log could not tell, what was left out."""
        return tuple(getattr(self.model.profile, "messages", ()) or ()) if self.model is not None else ()

    def action_help(self) -> None:
        self.push_screen(HelpScreen(self.HELP_KEYS, self._notes()))


STAGE_GEOMETRY = "smoothing the path and computing the geometry"


def short_frame(frame) -> str:
    """A few words for the header: the frame kind and CRS (full text is in the exports)."""
    try:
        d = frame.as_dict()
    except Exception:
        return str(frame)[:30]
    if d.get("kind") == "enu":
        return "local ENU"
    return str(d.get("crs") or d.get("kind") or "")[:30]
