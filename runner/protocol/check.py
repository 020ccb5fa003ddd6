"""`trialdeck check`: everything that can be known about a protocol before a participant arrives.

The check loads the protocol (every load error is reported, one line each), derives the first
participant's schedule (so impossible ordering constraints are reported, not looped on), and
then looks at what the session will show:

* every stimulus decodes, how it is scaled into the stimulus area, and whether it is enlarged
  beyond ``checks.max_upscale`` or held below the requested size by the screen;
* expected answers: present for scored trials (the answer maximum is checked at load time);
* trial counts per part and block, and the session's estimated length (shortest, typical,
  longest), with a warning when a stretch of trials without a pause exceeds
  ``checks.max_minutes_without_break``;
* with ``participants``, how often each block order is used;
* the mean relative luminance (WCAG 2.2) of every kind of screen and of every stimulus over
  the background, with a warning when stimuli spread more than ``checks.luminance_tolerance``;
* photosensitivity: the screen sequence with the shortest durations the protocol allows
  (``checks.min_response_ms`` for every screen that waits for a key) is tested against the
  three-flash rule of WCAG 2.2 success criterion 2.3.1, for the whole screen, the stimulus area
  and the photodiode patch.

Screen luminance is computed analytically from colours and areas: the background, the stimulus
image in its rectangle, the photodiode patch and the fixation cross. Text and the thin outlines
of answer and rating boxes are left out; they cover a few percent of the screen, far below the
10% luminance change that makes a flash. This module imports no pygame: the screen measures it
shares with the painter (fixation cross, photodiode patch, rating display time) come from the
pure :mod:`runner.session.views`, so the two cannot drift apart.

Length: over 600 lines on purpose. The checker walks the protocol once and its parts (stimuli,
luminance, flashes, counterbalancing, texts) share the loaded protocol, the measured screens and
one list of findings; the session length and the text checks live apart (length.py, texts.py).
"""

from __future__ import annotations

import math
import statistics
from collections import Counter
from dataclasses import dataclass, field
from pathlib import Path

from runner.contract.columns import level_key
from runner.errors import InputFileError, Problem, ProtocolError, TrialdeckError, UsageError
from runner.protocol.flashes import (
    FlashReport,
    count_general_flashes_in_windows,
    flash_area_is_small,
    small_flash_area_limit_px,
)
from runner.protocol.geometry import cm_to_px, deg_to_px
from runner.protocol.latin import block_order
from runner.protocol.length import (
    SECONDS_PER_MINUTE,
    LengthEstimate,
    estimate_length,
)
from runner.protocol.load import LoadedProtocol, display_name, load_protocol
from runner.protocol.luminance import LuminanceCache, mean_luminance_of_screen, relative_luminance
from runner.protocol.model import BlocksStep, Protocol
from runner.protocol.report import problem_at
from runner.protocol.runsheet import RunSheetRow, run_sheet
from runner.protocol.schedule import Schedule, build_schedule, derive_seed
from runner.protocol.sizes import stimulus_box
from runner.protocol.texts import (
    MIN_TEXT_CONTRAST,
    contrast_ratio,
    font_characters,
    font_path,
    heading_colour,
    hint_colour,
    missing_characters,
    participant_strings,
    text_faults,
)

# The screen measures the painter draws with (pure data: no pygame, no pylsl).
from runner.session.views import (
    PATCH_OFF,
    PATCH_ON,
    RATING_SHOW_CHOICE_S,
    fixation_rects,
    photodiode_rect,
)

__all__ = [
    "CheckReport",
    "LengthEstimate",
    "Screen",
    "check_protocol",
    "estimate_length",
    "screen_sequence",
]

#: Per kind of finding, at most this many lines name single rows; one more line gives the rest.
MAX_LISTED = 10
#: A stimulus shown this much below the requested size (in pixels) is reported.
SIZE_SLACK_PX = 1
#: Version of the ``check --json`` object (1 was a bare list of problems, now ``problems``).
JSON_FORMAT = 2


@dataclass
class CheckReport:
    """What `trialdeck check` found.

    Attributes
    ----------
    problems
        Errors and warnings, each a :class:`~runner.errors.Problem` pointing at a file line.
    facts
        Plain lines for the experimenter: counts, lengths, luminance, counterbalancing.
    loaded
        The loaded protocol, when it loaded.
    luminance
        Mean relative luminance by screen kind and by stimulus (``stimulus:<name>``).
    """

    problems: list[Problem] = field(default_factory=list)
    facts: list[str] = field(default_factory=list)
    loaded: LoadedProtocol | None = None
    luminance: dict[str, float] = field(default_factory=dict)
    length: LengthEstimate | None = None
    flash_reports: dict[str, FlashReport] = field(default_factory=dict)
    counts: dict[str, object] = field(default_factory=dict)
    contrast: dict[str, float] = field(default_factory=dict)
    run_sheet: list[RunSheetRow] | None = None

    @property
    def has_errors(self) -> bool:
        return any(p.severity == "error" for p in self.problems)

    def as_dict(self) -> dict[str, object]:
        """The report as ``check --json`` prints it (shape: docs/protocol.md, "check --json")."""
        length = self.length
        return {
            "format": JSON_FORMAT,
            "ok": not self.has_errors,
            "errors": sum(p.severity == "error" for p in self.problems),
            "warnings": sum(p.severity == "warning" for p in self.problems),
            "problems": [p.as_dict() for p in self.problems],
            "facts": list(self.facts),
            "counts": dict(self.counts),
            "length_s": None
            if length is None
            else {
                "shortest": round(length.shortest, 1),
                "typical": round(length.typical, 1),
                "longest": None if length.longest is None else round(length.longest, 1),
                "longest_unbounded_by": list(length.longest_unbounded_by),
                "max_stretch": round(length.max_stretch_s, 1),
            },
            "contrast": dict(self.contrast),
            "luminance": {k: round(v, 4) for k, v in self.luminance.items()},
            "run_sheet": None if self.run_sheet is None else [r.as_dict() for r in self.run_sheet],
        }

    def summary_lines(self) -> list[str]:
        errors = sum(p.severity == "error" for p in self.problems)
        warnings = sum(p.severity == "warning" for p in self.problems)
        verdict = f"{errors} error(s), {warnings} warning(s)"
        return [*self.facts, verdict]


@dataclass(frozen=True)
class Screen:
    """One screen of the worst-case sequence: kind, luminance (whole, stimulus area, patch), s."""

    kind: str
    whole: float
    area: float
    patch: float
    duration: float


# -- small helpers ---------------------------------------------------------------------------
def _minutes(seconds: float) -> str:
    if seconds < SECONDS_PER_MINUTE:
        return f"{seconds:.0f} s"
    return f"{seconds / SECONDS_PER_MINUTE:.1f} min"


def _frames_s(seconds: float, interval: float) -> float:
    """A duration as whole frames (at least one), the way the engine shows it."""
    return max(1, round(seconds / interval)) * interval


def _requested_raw_px(model: Protocol) -> tuple[str, float]:
    """The requested stimulus dimension ('width' or 'height') in pixels, before clamping."""
    size, screen = model.stimulus_size, model.screen
    sw = screen.resolution[0]
    for dim in ("width", "height"):
        px = getattr(size, f"{dim}_px")
        if px is not None:
            return dim, float(px)
        cm = getattr(size, f"{dim}_cm")
        if cm is not None and screen.width_cm is not None:
            return dim, cm_to_px(cm, screen_width_cm=screen.width_cm, screen_width_px=sw)
        deg = getattr(size, f"{dim}_deg")
        if deg is not None and screen.width_cm is not None and screen.distance_cm is not None:
            return dim, deg_to_px(
                deg,
                screen_width_cm=screen.width_cm,
                screen_width_px=sw,
                distance_cm=screen.distance_cm,
            )
    raise ValueError("the protocol gives no stimulus size")  # the model forbids this


def _fit(w: int, h: int, box: tuple[int, int]) -> tuple[int, int, float]:
    """Shown size and scale factor of a w x h image in ``box``, as the presenter scales it."""
    scale = min(box[0] / w, box[1] / h)
    return max(1, round(w * scale)), max(1, round(h * scale)), scale


def _centred(size: tuple[int, int], w: float, h: float) -> tuple[float, float, float, float]:
    return ((size[0] - w) / 2, (size[1] - h) / 2, w, h)


def _patch_rect(model: Protocol) -> tuple[float, float, float, float] | None:
    pd = model.photodiode
    if pd is None:
        return None
    return photodiode_rect(model.screen.resolution, pd.corner, pd.size_px)


def _fixation_patches(model: Protocol) -> list[tuple[tuple[float, float, float, float], str]]:
    colour = model.screen.text_colour
    return [(rect, colour) for rect in fixation_rects(model.screen.resolution)]


@dataclass(frozen=True)
class _Shown:
    """A stimulus file as shown: path, native and shown size, mean luminance over background."""

    path: Path
    native: tuple[int, int]
    shown: tuple[int, int]
    scale: float
    luminance: float
    screen: float  # whole-screen mean with the stimulus and the photodiode patch lit


class _Looks:
    """Luminance of each kind of screen, computed once."""

    def __init__(self, model: Protocol):
        size = model.screen.resolution
        bg = model.screen.background
        patch = _patch_rect(model)
        off = [(patch, PATCH_OFF)] if patch else []
        self.size = size
        self.patch = patch
        self.background = float(relative_luminance(bg))
        self.plain = mean_luminance_of_screen(size, bg, patches=off)
        self.fixation = mean_luminance_of_screen(size, bg, patches=_fixation_patches(model) + off)
        self.patch_on = float(relative_luminance(PATCH_ON))
        self.patch_off = float(relative_luminance(PATCH_OFF))


# -- the check -------------------------------------------------------------------------------
def check_protocol(
    path: Path | str,
    *,
    participants: int | None = None,
    cache: LuminanceCache | None = None,
    loaded: LoadedProtocol | None = None,
) -> CheckReport:
    """Check a protocol; problems are returned, not raised (the CLI decides the exit code).

    Parameters
    ----------
    path
        The protocol YAML file.
    participants
        Also check how often each block order is used by this many participants (numbered
        1..N, as participant labels ``P01``, ``P02``, ... are).
    cache
        Image statistics shared between checks (each file content is decoded once).
    loaded
        The protocol at ``path`` already loaded (``pilot`` and ``run`` check what they run).

    Returns
    -------
    CheckReport
        Errors, warnings and facts; ``has_errors`` decides the exit code.

    Raises
    ------
    UsageError
        When ``participants`` is below 1.
    """
    if participants is not None and participants < 1:
        raise UsageError(f"--participants must be 1 or more, got {participants}.")
    path = Path(path)
    report = CheckReport()
    try:
        loaded = loaded if loaded is not None else load_protocol(path)
    except ProtocolError as exc:
        report.problems.extend(exc.problems)
        return report
    except TrialdeckError as exc:
        code = "unreadable-file" if path.exists() else "missing-file"
        report.problems.append(Problem("error", display_name(path), 0, 0, str(exc), code=code))
        return report
    report.loaded = loaded
    report.problems.extend(loaded.warnings)
    try:
        schedule = build_schedule(loaded, "1", "1")
    except ProtocolError as exc:
        report.problems.extend(exc.problems)
        return report
    checker = _Checker(loaded, schedule, report, cache if cache is not None else LuminanceCache())
    checker.run(participants)
    return report


def refuse_check_errors(path: Path | str, loaded: LoadedProtocol) -> None:
    """Raise the errors ``trialdeck check`` finds in ``loaded`` (read from ``path``), so that
    ``pilot`` and ``run`` start exactly what ``check`` passes (warnings are not raised).

    Raises
    ------
    ProtocolError
        With every error-level problem of the check (for example unacknowledged flashing).
    """
    report = check_protocol(path, loaded=loaded)
    errors = [p for p in report.problems if p.severity == "error"]
    if errors:
        raise ProtocolError(errors)


class _Checker:
    def __init__(
        self,
        loaded: LoadedProtocol,
        schedule: Schedule,
        report: CheckReport,
        cache: LuminanceCache,
    ):
        self.loaded = loaded
        self.model = loaded.model
        self.schedule = schedule
        self.report = report
        self.cache = cache
        self.name = display_name(loaded.path)
        self.table_name = display_name(loaded.table.path)
        self.looks = _Looks(self.model)
        self.shown: dict[Path, _Shown] = {}

    # -- output helpers --------------------------------------------------------------------
    def at(
        self, loc: tuple[str | int, ...], message: str, severity: str = "warning", *, code: str
    ) -> None:
        self.report.problems.append(
            problem_at(self.loaded.doc, self.name, loc, message, severity=severity, code=code)
        )

    def rows(self, severity: str, found: list[tuple[int, str]], rest: str, *, code: str) -> None:
        """One line per table row (up to MAX_LISTED), then one line counting the others."""
        for line, message in found[:MAX_LISTED]:
            self.report.problems.append(
                Problem(severity, self.table_name, line, 1, message, code=code)
            )
        if len(found) > MAX_LISTED:
            first = found[MAX_LISTED][0]
            self.report.problems.append(
                Problem(
                    severity,
                    self.table_name,
                    first,
                    1,
                    f"{len(found) - MAX_LISTED} more {rest}",
                    code=code,
                )
            )

    def fact(self, text: str) -> None:
        self.report.facts.append(text)

    # -- steps -----------------------------------------------------------------------------
    def run(self, participants: int | None) -> None:
        self.counts()
        self.pilot_and_exclusions()
        self.expected()
        self.texts()
        self.contrast()
        self.structured_counts()
        self.physio()
        if not self.stimuli():
            return
        self.length()
        self.luminance()
        self.flashes()
        if participants is not None:
            self.counterbalancing(participants)
            self.report.run_sheet = run_sheet(self.loaded, participants)

    def physio(self) -> None:
        """Warnings where the protocol's physio section asks for what it cannot give."""
        from runner.physio.feasibility import physio_findings

        for loc, message, code in physio_findings(self.model, self.schedule):
            self.at(loc, message, code=code)

    def counts(self) -> None:
        trials = self.schedule.trials
        practice = sum(t.part == "practice" for t in trials)
        self.fact(
            f"{len(trials)} trials per session ({practice} practice, {len(trials) - practice} main)"
        )
        per_block: Counter[str] = Counter()
        for t in trials:
            per_block[f"{t.block_index}:{t.block}"] += 1
        parts = [f"{key.split(':', 1)[1]} {n}" for key, n in per_block.items()]
        self.fact(f"trials per block, in participant 1's order: {', '.join(parts)}")
        breaks = sum(it.kind == "break" for it in self.schedule.items)
        if breaks:
            self.fact(f"{breaks} scheduled break(s) between trials")
        used = {t.row for t in trials}
        unused = len(self.loaded.table.rows) - len(used)
        if unused:
            self.fact(f"{unused} row(s) of the trial table are not used by any sequence step")

    def pilot_and_exclusions(self) -> None:
        """Facts: the pilot's difficulty range over the main trials, and the exclusion rules."""
        model = self.loaded.model
        pilot = model.pilot
        main = [t for t in self.schedule.trials if t.part == "main"]
        if main:
            ds = [pilot.difficulty_of(t.expected, t.values) for t in main]
            weights = ", ".join(f"{w:g} x {c}" for c, w in pilot.difficulty.items())
            line = (
                f"simulated participant's difficulty ({weights}): {min(ds):.3g} to "
                f"{max(ds):.3g} over participant 1's main trials"
            )
            if pilot.give_up_difficulty is not None:
                n = sum(d >= pilot.give_up_difficulty for d in ds)
                line += f"; gives up ({pilot.give_up}) on {n} of {len(ds)}"
            self.fact(line)
        rules = model.exclusions
        if rules is not None:
            given = {k: v for k, v in rules.model_dump().items() if v is not None}
            self.fact(
                "pre-declared exclusions: "
                + (", ".join(f"{k} {v:g}" for k, v in given.items()) or "none given")
            )

    def expected(self) -> None:
        found: list[tuple[int, str]] = []
        seen: set[int] = set()
        rows = self.loaded.table.rows
        for t in self.schedule.trials:
            if t.expected is not None or t.row in seen:
                continue
            seen.add(t.row)
            what = (
                "practice feedback cannot say whether the answer was right"
                if t.feedback
                else "its trials go unscored"
            )
            found.append(
                (
                    rows[t.row - 1].line,
                    f"row {t.row} has no expected count ({t.stimulus!r}), so {what};"
                    " fill in the expected column if it should be scored",
                )
            )
        self.rows("warning", found, "rows have no expected count", code="no-expected")

    def stimuli(self) -> bool:
        """Decode every used stimulus and check how it is scaled; False when one cannot be read."""
        model = self.model
        box = stimulus_box(model)
        dim, want = _requested_raw_px(model)
        limit = model.screen.resolution[0 if dim == "width" else 1]
        if want > limit + SIZE_SLACK_PX:
            self.at(
                ("stimulus_size",),
                f"the requested {dim} is {want:.0f} px but the screen is only {limit} px"
                f" {'wide' if dim == 'width' else 'high'}, so stimuli are shown at {limit} px",
                code="screen-too-small",
            )
        table = self.loaded.table
        errors: list[tuple[int, str]] = []
        upscaled: list[tuple[int, str]] = []
        held: list[tuple[int, str]] = []
        first_row: dict[Path, int] = {}
        for t in self.schedule.trials:
            row = table.rows[t.row - 1]
            file = table.stimulus_path(row)
            if file in self.shown or file in first_row:
                continue
            first_row[file] = row.line
            try:
                stats = self.cache.stats(file)
            except InputFileError:
                # The reader's own message names a temporary buffer; say what to do instead.
                errors.append(
                    (
                        row.line,
                        f"stimulus {row.stimulus!r} cannot be decoded as an image ({file});"
                        " check that it is a PNG or JPEG file and not damaged",
                    )
                )
                continue
            w, h, scale = _fit(stats.width, stats.height, box)
            lum = stats.mean_luminance(model.screen.background)
            rect = _centred(model.screen.resolution, w, h)
            patches = [(self.looks.patch, PATCH_ON)] if self.looks.patch else []
            screen = mean_luminance_of_screen(
                model.screen.resolution,
                model.screen.background,
                patches=patches,
                image=(file, rect),
                cache=self.cache,
            )
            self.shown[file] = _Shown(file, (stats.width, stats.height), (w, h), scale, lum, screen)
            if scale > model.checks.max_upscale:
                upscaled.append(
                    (
                        row.line,
                        f"stimulus {row.stimulus!r} ({stats.width}x{stats.height} px) is enlarged"
                        f" {scale:.2f} times to {w}x{h} px, more than checks.max_upscale"
                        f" ({model.checks.max_upscale:g}); it will look blurred, so supply a"
                        " larger image",
                    )
                )
            got = w if dim == "width" else h
            target = min(want, limit)
            if got < target - SIZE_SLACK_PX:
                other = "height" if dim == "width" else "width"
                held.append(
                    (
                        row.line,
                        f"stimulus {row.stimulus!r} is shown {got} px {dim}, not the {target:.0f} px"
                        f" stimulus_size asks for, because its {other} ({w}x{h} px shown) fills"
                        f" the screen's {other}",
                    )
                )
        self.rows("error", errors, "stimuli cannot be decoded", code="undecodable-stimulus")
        self.rows(
            "warning",
            upscaled,
            "stimuli are enlarged beyond checks.max_upscale",
            code="upscaled-stimulus",
        )
        self.rows(
            "warning", held, "stimuli are shown below the requested size", code="shrunk-stimulus"
        )
        if self.shown:
            sizes = Counter(s.shown for s in self.shown.values())
            common = ", ".join(f"{w}x{h} px ({n})" for (w, h), n in sizes.most_common(3))
            self.fact(f"{len(self.shown)} distinct stimulus file(s), shown at {common}")
        return not errors

    # -- length ----------------------------------------------------------------------------
    def length(self) -> None:
        est = estimate_length(self.schedule, self.model)
        self.report.length = est
        longest = (
            _minutes(est.longest)
            if est.longest is not None
            else f"no upper bound ({', '.join(est.longest_unbounded_by)} is none)"
        )
        self.fact(
            f"session length: shortest {_minutes(est.shortest)}, typical {_minutes(est.typical)},"
            f" longest {longest}"
        )
        limit_s = self.model.checks.max_minutes_without_break * SECONDS_PER_MINUTE
        if est.max_stretch_s > limit_s:
            every = max(1, math.floor(limit_s / est.typical_trial_s))
            loc: tuple[str | int, ...] = (
                ("breaks",) if self.model.breaks is not None else ("sequence", est.max_stretch_step)
            )
            self.at(
                loc,
                f"about {_minutes(est.max_stretch_s)} of trials run without a break (typical"
                f" estimate, up to sequence[{est.max_stretch_step}]), more than"
                f" checks.max_minutes_without_break ({self.model.checks.max_minutes_without_break:g});"
                f" add breaks.every_trials: {every} or breaks.every_minutes, against fatigue",
                code="long-stretch",
            )

    # -- luminance -------------------------------------------------------------------------
    def luminance(self) -> None:
        looks = self.looks
        lum = self.report.luminance
        lum.update(
            {
                "background": looks.background,
                "blank": looks.plain,
                "text screens": looks.plain,
                "fixation": looks.fixation,
            }
        )
        shown = sorted(self.shown.values(), key=lambda s: s.luminance)
        for s in shown:
            lum[f"stimulus:{display_name(s.path)}"] = s.luminance
        screens = [s.screen for s in shown]
        lum["stimulus screen (mean)"] = statistics.fmean(screens)
        self.fact(
            f"screen luminance (WCAG relative): background {looks.background:.3f}, fixation"
            f" {looks.fixation:.3f}, text screens {looks.plain:.3f} (text not counted),"
            f" stimulus screens {min(screens):.3f} to {max(screens):.3f}"
        )
        low, high = shown[0], shown[-1]
        mean = statistics.fmean(s.luminance for s in shown)
        self.fact(
            f"stimulus luminance over the background: mean {mean:.3f}, darkest {low.luminance:.3f}"
            f" ({display_name(low.path)}), brightest {high.luminance:.3f} ({display_name(high.path)})"
        )
        tol = self.model.checks.luminance_tolerance
        spread = high.luminance - low.luminance
        if spread > tol:
            self.at(
                ("checks", "luminance_tolerance"),
                f"stimulus mean luminance spreads {spread:.3f} (from {low.luminance:.3f} in"
                f" {display_name(low.path)} to {high.luminance:.3f} in {display_name(high.path)}),"
                f" more than the tolerance {tol:g}; pupil size follows luminance, so match the"
                " stimuli's brightness or raise checks.luminance_tolerance knowingly",
                code="luminance-spread",
            )

    # -- flashes ---------------------------------------------------------------------------
    def flashes(self) -> None:
        model = self.model
        screens = screen_sequence(self.schedule, model, self.looks, self.shown, self.loaded)
        w, h = model.screen.resolution
        largest = max(s.shown[0] * s.shown[1] for s in self.shown.values())
        parts: list[tuple[str, str, float]] = [
            ("whole screen", "whole", float(w * h)),
            ("stimulus area", "area", float(largest)),
        ]
        if self.looks.patch is not None:
            parts.append(("photodiode patch", "patch", float(model.photodiode.size_px**2)))  # type: ignore[union-attr]  # a patch implies a photodiode
        ack = model.checks.acknowledge_flashes
        worst = 0
        for label, attr, area in parts:
            seq = [(getattr(s, attr), s.duration) for s in screens]
            rep = count_general_flashes_in_windows(seq)
            self.report.flash_reports[label] = rep
            worst = max(worst, rep.max_flashes) if attr != "patch" else worst
            if rep.passes:
                continue
            where = screens[rep.screen_indices[0]].kind if rep.screen_indices else "?"
            small = flash_area_is_small(area, screen_w_px=w, screen_h_px=h)
            if small:
                limit = small_flash_area_limit_px(screen_w_px=w, screen_h_px=h)
                self.fact(
                    f"the {label} can flash {rep.max_flashes} times in one second, but its area"
                    f" ({area:.0f} px) is within the small-area limit ({limit:.0f} px) of"
                    " WCAG 2.3.1"
                )
                continue
            message = (
                f"the {label} can flash {rep.max_flashes} times within one second (from"
                f" {rep.window_start_s:.2f} s, at the {where} screen) with the shortest durations"
                f" the protocol allows (checks.min_response_ms {model.checks.min_response_ms:g});"
                " WCAG 2.3.1 allows at most 3 and flashing can trigger seizures in photosensitive"
                " people. Lengthen timing.gap_ms, timing.fixation_ms or timing.feedback_ms, or"
                " match the stimuli's luminance to the background"
            )
            if ack:
                self.at(
                    ("checks", "acknowledge_flashes"),
                    message + "; acknowledged by checks.acknowledge_flashes (ethics approval)",
                    "warning",
                    code="flashing",
                )
            else:
                self.at(
                    ("timing",) if ("timing",) in self.loaded.doc.marks else (),
                    message + "; if the local ethics board approved it, set"
                    " checks.acknowledge_flashes: true",
                    "error",
                    code="flashing",
                )
        self.fact(
            f"three-flash rule (WCAG 2.3.1, general flashes only; red flashes are not checked):"
            f" at most {worst} flash(es) in any second of the whole screen and stimulus area"
        )

    def structured_counts(self) -> None:
        """The counts of the facts, as data for ``check --json``."""
        trials = self.schedule.trials
        practice = sum(t.part == "practice" for t in trials)
        blocks: list[dict[str, object]] = []
        for item in self.schedule.items:
            if item.kind == "block" and item.trials:
                blocks.append({"block": item.trials[0].block, "trials": len(item.trials)})
        self.report.counts = {
            "trials": len(trials),
            "practice": practice,
            "main": len(trials) - practice,
            "blocks": blocks,
            "breaks": sum(it.kind == "break" for it in self.schedule.items),
            "pages": sum(it.kind == "page" for it in self.schedule.items),
            "rests": sum(it.kind == "rest" for it in self.schedule.items),
            "stimuli": len({t.stimulus for t in trials}),
            "table_rows": len(self.loaded.table.rows),
            "unused_rows": len(self.loaded.table.rows) - len({t.row for t in trials}),
        }

    # -- the participant's text -----------------------------------------------------------
    def texts(self) -> None:
        """Every participant-facing string can be shown and drawn by the chosen font."""
        model = self.model
        columns = [c for c in (model.answer.prompt_column, model.rating.question_column) if c]
        values = {
            c: list(dict.fromkeys(row.value(c) for row in self.loaded.table.rows)) for c in columns
        }
        strings = participant_strings(model, self.loaded.pages, values)
        for loc, text in strings:
            for fault in text_faults(text):
                self.at(loc, fault, "error", code="unshowable-text")
        font = font_path(model, self.loaded.path)
        font_loc = ("screen", "font")
        try:
            available = font_characters(font)
        except Exception as exc:  # fontTools raises many kinds for a file that is not a font
            reason = "does not exist" if not font.exists() else f"is not a usable font ({exc})"
            self.at(font_loc, f"the font file {font} {reason}", "error", code="unusable-font")
            return
        missing: dict[tuple[str | int, ...], set[str]] = {}
        for loc, text in strings:
            gone = missing_characters(text, available)
            if gone:
                missing.setdefault(loc, set()).update(gone)
        for loc, chars in missing.items():
            shown = " ".join(f"{ch!r} (U+{ord(ch):04X})" for ch in sorted(chars)[:MAX_LISTED])
            more = f" and {len(chars) - MAX_LISTED} more" if len(chars) > MAX_LISTED else ""
            self.at(
                loc,
                f"the font {font.name} cannot draw {shown}{more}; they would show as boxes."
                " Set screen.font to a font file that has them",
                "error",
                code="missing-glyph",
            )
        self.fact(f"text: {len(strings)} participant-facing strings, drawn with {font.name}")

    def contrast(self) -> None:
        """WCAG 2.2 contrast of each text colour with what it is drawn on (4.5:1 for text)."""
        sc = self.model.screen
        bg = sc.background
        pairs = [
            ("text", sc.text_colour, bg, ("screen", "text_colour")),
            ("hints", hint_colour(sc.text_colour, bg), bg, ("screen", "text_colour")),
            (
                "headings",
                heading_colour(sc.text_colour, sc.accent_colour, bg),
                bg,
                ("screen", "accent_colour"),
            ),
        ]
        measured = []
        for what, fg, under, loc in pairs:
            ratio = contrast_ratio(fg, under)
            measured.append(f"{what} {ratio:.1f}:1")
            self.report.contrast[what] = round(ratio, 2)
            if ratio < MIN_TEXT_CONTRAST:
                self.at(
                    loc,
                    f"{what} ({fg} on {under}) have a contrast ratio of {ratio:.2f}:1, below the"
                    f" {MIN_TEXT_CONTRAST}:1 WCAG 2.2 asks for text; choose a darker or lighter"
                    " colour",
                    code="low-contrast",
                )
        self.fact("text contrast on the background (WCAG 2.2): " + ", ".join(measured))

    # -- counterbalancing ------------------------------------------------------------------
    def counterbalancing(self, participants: int) -> None:
        for i, step in enumerate(self.model.sequence):
            if not isinstance(step, BlocksStep):
                continue
            spec = step.blocks
            levels = list(
                dict.fromkeys(
                    t.block
                    for it in self.schedule.items
                    if it.kind == "block" and it.step == i
                    for t in it.trials
                )
            )
            written = (
                [str(v) for v in spec.levels] if spec.levels else sorted(levels, key=level_key)
            )
            used: Counter[tuple[str, ...]] = Counter()
            for p in range(1, participants + 1):
                label = f"P{p:02d}"
                seed = derive_seed(self.loaded.content_hash, label, "1")
                used[tuple(block_order(written, p - 1, method=spec.order, seed=seed))] += 1
            counts = sorted(used.values())
            self.fact(
                f"sequence[{i}] block orders ({spec.order}) over {participants} participants:"
                f" {len(used)} distinct, each used {counts[0]} to {counts[-1]} times"
            )
            if spec.order == "fixed" or len(written) < 2:
                continue
            if spec.order == "random":
                if counts[0] != counts[-1]:
                    self.at(
                        ("sequence", i, "blocks", "order"),
                        f"with order 'random' the {participants} participants get {len(used)}"
                        f" different orders, used {counts[0]} to {counts[-1]} times each; use"
                        " 'balanced-latin' to use every order equally often",
                        code="unbalanced-orders",
                    )
                continue
            rows = 2 * len(written) if len(written) % 2 else len(written)
            if participants % rows:
                fewer, more = participants // rows * rows, (participants // rows + 1) * rows
                self.at(
                    ("sequence", i, "blocks", "order"),
                    f"the balanced Latin square for {len(written)} levels has {rows} orders, so"
                    f" {participants} participants do not use each equally often (some"
                    f" {counts[-1]} times, some {counts[0]}); plan {more}"
                    + (f" or {fewer}" if fewer else "")
                    + " participants",
                    code="unbalanced-orders",
                )


def screen_sequence(
    schedule: Schedule,
    model: Protocol,
    looks: _Looks,
    shown: dict[Path, _Shown],
    loaded: LoadedProtocol,
) -> list[Screen]:
    """The session's screens with the shortest durations the protocol allows.

    Every screen that waits for a key lasts ``checks.min_response_ms``; timed screens last their
    shortest setting (fixation at its low end); each is rounded to whole frames, at least one.
    Typing screens look like the screen they are typed on and are merged into it.
    """
    interval = 1.0 / model.screen.refresh_hz
    t, c = model.timing, model.checks
    quick = _frames_s(c.min_response_ms / 1000, interval)
    one = interval
    bg = looks.background
    plain, fix = looks.plain, looks.fixation
    off = looks.patch_off if looks.patch is not None else bg
    on = looks.patch_on if looks.patch is not None else bg
    out: list[Screen] = []

    def add(kind: str, whole: float, area: float, patch: float, seconds: float) -> None:
        out.append(Screen(kind, whole, area, patch, seconds))

    table = loaded.table
    for item in schedule.items:
        if item.kind == "page":
            add("page", plain, bg, off, quick)
        elif item.kind == "rest":
            look = fix if item.show == "fixation" else plain
            add("rest", look, bg, off, _frames_s(item.seconds, interval))
            add("rest-end", plain, bg, off, one)
        elif item.kind == "break":
            add("break", plain, bg, off, _frames_s(item.seconds, interval) if item.seconds else one)
            add("break-ready", plain, bg, off, quick)
        else:
            for trial in item.trials:
                stim = shown[table.stimulus_path(table.rows[trial.row - 1])]
                add("fixation", fix, bg, off, _frames_s(t.fixation_ms[0] / 1000, interval))
                add("stimulus", stim.screen, stim.luminance, on, quick)
                if model.answer.mode == "after":
                    add("answer", plain, bg, off, quick)
                else:
                    add("offset", plain, bg, off, one)
                add("rating", plain, bg, off, quick)
                add("rating-chosen", plain, bg, off, _frames_s(RATING_SHOW_CHOICE_S, interval))
                if trial.feedback:
                    add("feedback", plain, bg, off, _frames_s(t.feedback_ms / 1000, interval))
                add("gap", plain, bg, off, _frames_s(t.gap_ms / 1000, interval))
    add("end", plain, bg, off, one)
    return out
