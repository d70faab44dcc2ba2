"""Findings for one log: profile, automatic sections and the user's marks -- the step that
``trackframe flag`` and ``trackframe batch`` (each worker) share."""

from __future__ import annotations

from dataclasses import dataclass

from .design import Limits
from .errors import InputError
from .sections import Section, all_sections, marks_outside
from .stations import Profile


@dataclass(frozen=True, eq=False)
class Findings:
    """What flagging one log produced.

    Attributes
    ----------
    run
        ``survey.pipeline.ProfileRun`` (track, cleaning report, frame, profile).
    sections
        Automatic and marked sections, in chainage order.
    input_sha256
        SHA-256 of the log file (hex).
    frame_text
        One-line description of the frame.
    warnings
        Problems worth showing that did not stop the run (changed log, marks out of range).
    """

    run: object
    sections: tuple[Section, ...]
    input_sha256: str
    frame_text: str
    warnings: tuple[str, ...]

    @property
    def profile(self) -> Profile:
        return self.run.profile


def flag_log(
    path: str,
    limits: Limits,
    step_m: float = 1.0,
    use_marks: bool = True,
    **profile_options,
) -> Findings:
    """Compute the profile of ``path``, flag it with ``limits`` and add the marks of its sidecar.

    ``profile_options`` go to ``survey.pipeline.run_profile`` (reading, frame, IMU options).
    A corrupt sidecar raises ``InputError`` with a hint to run without marks.
    """
    from . import pipeline  # looked up at call time so tests can stand in for run_profile
    from .marks import MarkStore, file_sha256, sidecar_path

    warnings: list[str] = []
    store = None
    if use_marks:
        try:
            store = MarkStore.load(path)
        except InputError as exc:
            if exc.path == str(sidecar_path(path)):
                raise InputError(exc.path, f"{exc.message}; or run with --no-marks", exc.where) from None
            raise
        warnings.extend(store.warnings)
    run = pipeline.run_profile(path, step_m=step_m, **profile_options)
    profile = run.profile
    marks = store.marks if store is not None else ()
    top = float(profile.chainage_m[-1]) if len(profile) else 0.0
    for m in marks_outside(profile, marks):
        warnings.append(f"mark {m.id} ({m.start_m:g}-{m.end_m:g} m) reaches outside the profile (0-{top:g} m)")
    sections = tuple(all_sections(profile, limits, marks))
    sha = store.log_sha256 if store is not None else file_sha256(path)[0]
    frame_text = profile.frame or run.frame.describe()
    return Findings(run, sections, sha, frame_text, tuple(warnings))
