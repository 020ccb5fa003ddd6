"""Replay a session's screens from its journal and frozen protocol.

Every flip the engine made is journaled with the view it drew (``flip`` lines). A replay rebuilds
those views with :func:`runner.session.views.view_from_dict` and draws them with the same
presenter (:class:`runner.present.display.Display` and its :class:`~runner.present.painter.Painter`),
so replayed frames match the live ones pixel for pixel.

Two ways to replay:

* **Timed** (a window to watch, or any replay with an explicit speed): each screen is flipped
  at its recorded time divided by the speed. Escape stops the replay.
* **Untimed** (headless with ``frames_dir``): every screen is drawn and saved as fast as the
  machine allows; timing means nothing when nobody watches.

With ``frames_dir`` one PNG is written per distinct screen (named like the pilot's ``--frames``
output) plus ``contact-sheet.png``, a grid of small copies for a quick look at a whole session.

Stimulus paths: a journaled ``StimulusView`` holds the absolute path used live. When that file
does not exist at replay time (the session folder was copied to another computer), the trial's
stimulus as written in the trial table is looked for relative to ``stimuli_dir`` (when given),
then relative to the folder of the trial table the session ran from (the header's
``trial_table_file``). A file found there whose content hash differs from the one journaled at
the session is used but noted, since the replay then shows something else than the participant saw.
"""

from __future__ import annotations

import dataclasses
import math
import struct
import zlib
from concurrent.futures import Future, ThreadPoolExecutor
from dataclasses import dataclass, field
from pathlib import Path
from typing import TYPE_CHECKING, Any

from runner.contract.hashing import HashCache
from runner.contract.layout import FROZEN_PROTOCOL, JOURNAL_NAME
from runner.contract.outputs import replace_file
from runner.errors import InputFileError, ProtocolError
from runner.journal.frozen import frozen_file_text, frozen_protocol, frozen_text
from runner.journal.read import verify_chain
from runner.protocol.model import Protocol
from runner.session.views import StimulusView, View, view_from_dict

if TYPE_CHECKING:
    from runner.present.contact_sheet import ContactSheet
    from runner.present.display import Display

__all__ = [
    "CONTACT_SHEET",
    "ReplayPlan",
    "ReplayResult",
    "ReplayScreen",
    "plan_replay",
    "replay_session",
    "write_png",
]

CONTACT_SHEET = "contact-sheet.png"
# Before each timed flip, input is polled until this many refresh intervals before it, so Escape
# is seen within a frame while the flip still lands on time.
POLL_LEAD_INTERVALS = 1.0
ESCAPE = "escape"
# Headless frame export: PNG files written with zlib level 1 on worker threads (zlib releases
# the interpreter lock), since encoding, not drawing, is the slow part. Level 1 files of these
# flat screens are about as small as the default level's and several times faster to write.
PNG_LEVEL = 1
PNG_WORKERS = 2
PNG_SIGNATURE = b"\x89PNG\r\n\x1a\n"
PNG_RGB8 = (
    8,
    2,
    0,
    0,
    0,
)  # bit depth 8, colour type 2 (RGB), deflate, adaptive filter, no interlace
FRAME_NAME = "{index:05d}-{view}.png"  # as runner.present.display.Display.save_frame names them


@dataclass(frozen=True)
class ReplayScreen:
    """One journaled flip: when it happened, what it drew, and where in the journal it is."""

    line: int
    t: float
    kind: str
    view: View
    photodiode: bool
    trial: int | None


@dataclass
class ReplayPlan:
    """Everything needed to redraw a session, read from its folder (no display needed)."""

    folder: Path
    header: dict[str, Any]
    model: Protocol
    screens: list[ReplayScreen]
    notes: list[str] = field(default_factory=list)

    @property
    def model_holder(self) -> _ModelOnly:
        # A font named by the protocol is found next to the protocol the session ran.
        where = self.header.get("protocol_file")
        return _ModelOnly(self.model, Path(where) if where else self.folder / "protocol.yaml")


@dataclass(frozen=True)
class _ModelOnly:
    """What :func:`runner.present.display.display_for` reads from a loaded protocol."""

    model: Protocol
    path: Path


@dataclass
class ReplayResult:
    """What a replay did. ``lateness_ms`` is (actual - planned) flip time, timed replays only."""

    screens: int
    frames: list[Path]
    contact_sheet: Path | None
    stopped_early: bool
    timed: bool
    lateness_ms: list[float] = field(default_factory=list)
    seconds: float = 0.0
    notes: list[str] = field(default_factory=list)


def _protocol_model(folder: Path, header: dict[str, Any], notes: list[str]) -> Protocol:
    """The protocol the session ran with: the frozen copy, else the journal header's text."""
    text = frozen_text(header)
    frozen = folder / FROZEN_PROTOCOL
    on_disk = frozen_file_text(folder)
    if on_disk is not None:
        if text is not None and on_disk != text:
            notes.append(
                f"{frozen} differs from the protocol text in the journal header; the header's "
                "text (what the session ran with) was used."
            )
        elif text is None:
            text = on_disk
    if text is None:
        raise InputFileError(
            f"{folder} holds neither a frozen protocol.yaml nor the protocol text in its journal "
            "header, so its screens cannot be redrawn."
        )
    try:
        return frozen_protocol(text, str(frozen))
    except (ProtocolError, ValueError) as exc:
        raise InputFileError(
            f"the frozen protocol of {folder} cannot be read by this trialdeck ({exc}); replay "
            "it with the trialdeck version that ran it."
        ) from None


def _stimulus_resolver(
    header: dict[str, Any],
    trial_stimulus: dict[int, str],
    stimuli_dir: Path | None,
    notes: list[str],
):
    table_file = header.get("trial_table_file")
    table_dir = Path(table_file).parent if isinstance(table_file, str) else None
    hashes = header["stimulus_hashes"] if isinstance(header.get("stimulus_hashes"), dict) else {}
    cache = HashCache()
    resolved: dict[tuple[str, str | None], str] = {}

    def resolve(view: StimulusView, trial: int | None) -> StimulusView:
        rel = trial_stimulus.get(trial) if trial is not None else None
        key = (view.stimulus, rel)
        if key not in resolved:
            resolved[key] = _find(view.stimulus, rel)
        found = resolved[key]
        return view if found == view.stimulus else dataclasses.replace(view, stimulus=found)

    def _find(live: str, rel: str | None) -> str:
        if Path(live).is_file():
            return live
        tried = [live]
        if rel is not None:
            for base in (stimuli_dir, table_dir):
                if base is None:
                    continue
                cand = (base / rel).resolve()
                tried.append(str(cand))
                if cand.is_file():
                    want = hashes.get(rel)
                    if want is not None and cache.sha256(cand) != want:
                        notes.append(
                            f"{cand} differs from the stimulus shown in the session ({rel}); the "
                            "replay shows the file as it is now."
                        )
                    notes.append(f"{live} no longer exists; showed {cand} instead.")
                    return str(cand)
        raise InputFileError(
            f"the stimulus {rel or live} cannot be found (looked for {', '.join(tried)}); give "
            "the folder the trial table's stimulus paths are relative to with --stimuli."
        )

    return resolve


def plan_replay(folder: str | Path, *, stimuli_dir: str | Path | None = None) -> ReplayPlan:
    """Read a session folder and rebuild every journaled screen.

    Parameters
    ----------
    folder : str or Path
        The session folder (``…/sub-<participant>/ses-<session>/``).
    stimuli_dir : str or Path, optional
        Folder the trial table's stimulus paths are relative to, when the live paths are gone.

    Returns
    -------
    ReplayPlan

    Raises
    ------
    InputFileError
        Not a session folder, no usable protocol, or a stimulus that cannot be found.
    JournalError
        The journal cannot be read.
    """
    folder = Path(folder)
    path = folder / JOURNAL_NAME
    if not path.is_file():
        raise InputFileError(
            f"{folder} holds no journal.jsonl, so it is not a session folder; give the folder "
            "…/sub-<participant>/ses-<session>/ that trialdeck wrote."
        )
    chain = verify_chain(path)
    notes: list[str] = []
    if chain.broken:
        first = next(p for p in chain.problems if p.severity == "error")
        notes.append(
            f"the journal fails its integrity check ({first.message}); the replay shows what "
            "the lines say, which may not be what was on the screen. Run trialdeck audit."
        )
    records = chain.records
    header = chain.header
    if not header:
        raise InputFileError(f"{path} has no header line, so its screens cannot be redrawn.")
    model = _protocol_model(folder, header, notes)
    trial_stimulus: dict[int, str] = {}
    for _, rec in records:
        if rec.get("event") == "trial_start" and isinstance(rec.get("trial"), int):
            if isinstance(rec.get("stimulus"), str):
                trial_stimulus[rec["trial"]] = rec["stimulus"]
    resolve = _stimulus_resolver(
        header, trial_stimulus, None if stimuli_dir is None else Path(stimuli_dir), notes
    )
    screens: list[ReplayScreen] = []
    unknown = 0
    for n, rec in records:
        if rec.get("event") != "flip" or not isinstance(rec.get("view"), dict):
            continue
        t = rec.get("t")
        if not isinstance(t, (int, float)) or not math.isfinite(t):
            continue
        try:
            view = view_from_dict(rec["view"])
        except (KeyError, TypeError):
            unknown += 1
            continue
        trial = rec.get("trial") if isinstance(rec.get("trial"), int) else None
        if isinstance(view, StimulusView):
            view = resolve(view, trial)
        screens.append(
            ReplayScreen(
                n,
                float(t),
                str(rec.get("kind", "")),
                view,
                bool(rec.get("photodiode", False)),
                trial,
            )
        )
    if unknown:
        notes.append(
            f"{unknown} journaled screens are of a kind this trialdeck cannot draw and were "
            "skipped."
        )
    if not screens:
        raise InputFileError(
            f"{path} journals no screens (no flip lines), so there is nothing to replay."
        )
    return ReplayPlan(folder=folder, header=header, model=model, screens=screens, notes=notes)


def replay_session(
    plan: ReplayPlan,
    *,
    speed: float = 1.0,
    timed: bool = True,
    fullscreen: bool = False,
    frames_dir: str | Path | None = None,
) -> ReplayResult:
    """Show a planned replay on the participant's display (pygame).

    Parameters
    ----------
    plan : ReplayPlan
        From :func:`plan_replay`.
    speed : float
        Timed replays flip each screen at its recorded time divided by this.
    timed : bool
        False draws every screen as fast as possible (headless frame export).
    fullscreen : bool
        Open the display fullscreen (ignored under the SDL dummy driver).
    frames_dir : str or Path, optional
        Write one PNG per distinct screen and ``contact-sheet.png`` here.

    Returns
    -------
    ReplayResult
    """
    from runner.present.contact_sheet import write_contact_sheet
    from runner.present.display import display_for
    from runner.session.markers import local_clock

    frames = None if frames_dir is None else Path(frames_dir)
    display = display_for(plan.model_holder, fullscreen=fullscreen, frames_dir=frames)
    box = (
        plan.header.get("screen", {}).get("stimulus_box")
        if isinstance(plan.header.get("screen"), dict)
        else None
    )
    notes = list(plan.notes)
    if box and list(box) != [display.stimulus_rect.width, display.stimulus_rect.height]:
        notes.append(
            f"the stimulus box is {display.stimulus_rect.width}x{display.stimulus_rect.height} "
            f"now but was {box[0]}x{box[1]} in the session."
        )
    lateness: list[float] = []
    stopped = False
    started = local_clock()
    try:
        if timed:
            t0 = plan.screens[0].t
            base = local_clock() + display.interval
            for s in plan.screens:
                at = base + (s.t - t0) / speed
                hit = display.wait_key(frozenset(), at - POLL_LEAD_INTERVALS * display.interval)
                if hit is not None and hit.key in (ESCAPE, "quit"):
                    stopped = True
                    break
                flipped = display.show(s.view, at=at, photodiode=s.photodiode)
                lateness.append((flipped - at) * 1000.0)
        else:
            written_untimed = _draw_untimed(plan, display, frames)
    finally:
        # Closing saves the last pending frame of a timed replay.
        display.close()
    sheet = None
    if timed:
        written = list(display.frames_written) if frames is not None else []
        if frames is not None and written:
            labels = _labels(plan.screens, written)
            sheet = write_contact_sheet(written, frames / CONTACT_SHEET, labels=labels)
    else:
        written, sheet_obj = written_untimed
        if frames is not None and sheet_obj is not None:
            sheet = sheet_obj.save(frames / CONTACT_SHEET)
    return ReplayResult(
        screens=len(plan.screens),
        frames=written,
        contact_sheet=sheet,
        stopped_early=stopped,
        timed=timed,
        lateness_ms=lateness,
        seconds=local_clock() - started,
        notes=notes,
    )


def _draw_untimed(
    plan: ReplayPlan, display: Display, frames: Path | None
) -> tuple[list[Path], ContactSheet | None]:
    """Draw every screen as fast as possible; save each distinct one and its thumbnail.

    The drawing is the presenter's own (:meth:`runner.present.display.Display.draw`), so the
    pixels are the live ones; a screen is saved when it differs from the last saved one, the
    rule :meth:`runner.present.display.Display.show` follows.
    """
    from runner.present.contact_sheet import ContactSheet

    if frames is None:
        for s in plan.screens:
            display.draw(s.view, photodiode=s.photodiode)
        return [], None
    frames.mkdir(parents=True, exist_ok=True)
    size = display.size
    sheet = ContactSheet(size)
    written: list[Path] = []
    pending: list[Future[Path]] = []
    last: View | None = None
    with ThreadPoolExecutor(max_workers=PNG_WORKERS) as pool:
        for s in plan.screens:
            display.draw(s.view, photodiode=s.photodiode)
            if s.view == last:
                continue
            last = s.view
            path = frames / FRAME_NAME.format(index=len(written) + 1, view=type(s.view).__name__)
            rgb = display.pixels()
            pending.append(pool.submit(write_png, path, rgb, size))
            trial = f" t{s.trial}" if s.trial is not None else ""
            sheet.add(rgb, f"{len(written) + 1} {s.kind}{trial}")
            written.append(path)
        for job in pending:
            job.result()  # re-raises a failed write here, with its own message
    return written, sheet


def write_png(path: Path, rgb: bytes, size: tuple[int, int], *, level: int = PNG_LEVEL) -> Path:
    """Write 8-bit RGB pixels (rows top to bottom) as a PNG file.

    Follows the PNG specification (W3C, "Portable Network Graphics (PNG) Specification"): the
    signature, an IHDR chunk, one IDAT chunk holding the zlib-compressed rows each preceded by
    filter type 0, and IEND; every chunk carries its CRC-32.

    Parameters
    ----------
    path : Path
    rgb : bytes
        ``width * height * 3`` bytes.
    size : (int, int)
        Width and height in pixels.
    level : int
        zlib compression level (1 is fast; the pixels are the same at every level).

    Returns
    -------
    Path
    """
    import numpy as np

    w, h = size
    pixels = np.frombuffer(rgb, dtype=np.uint8).reshape(h, w * 3)
    rows = np.zeros((h, w * 3 + 1), dtype=np.uint8)
    rows[:, 1:] = pixels

    def chunk(tag: bytes, data: bytes) -> bytes:
        return struct.pack(">I", len(data)) + tag + data + struct.pack(">I", zlib.crc32(tag + data))

    ihdr = struct.pack(">IIBBBBB", w, h, *PNG_RGB8)
    data = (
        PNG_SIGNATURE
        + chunk(b"IHDR", ihdr)
        + chunk(b"IDAT", zlib.compress(rows.tobytes(), level))
        + chunk(b"IEND", b"")
    )
    try:
        with replace_file(path, binary=True) as fh:  # never written through a link
            fh.write(data)
    except OSError as exc:
        raise InputFileError(f"the frame {path} cannot be written: {exc.strerror}.") from None
    return path


def _labels(screens: list[ReplayScreen], written: list[Path]) -> list[str]:
    """A caption per saved frame: its number, screen kind and trial."""
    kinds: list[ReplayScreen] = []
    last: View | None = None
    s: ReplayScreen | None
    for s in screens:
        if s.view != last:
            kinds.append(s)
            last = s.view
    out = []
    for i, path in enumerate(written):
        s = kinds[i] if i < len(kinds) else None
        if s is None:
            out.append(path.stem)
        else:
            trial = f" t{s.trial}" if s.trial is not None else ""
            out.append(f"{i + 1} {s.kind}{trial}")
    return out
