"""Start, run and close one session: the order of the steps is what keeps data safe.

1. Load and schedule (bad input stops here; nothing has been created).
2. Take the session lock of an existing session (one writer per session: a second process is
   refused, naming the one that runs). Refuse an existing session folder (unless resuming it);
   a resume keeps the session's mode and speed and refuses changed stimuli unless they are
   accepted. Check the output folder takes writes and has room.
3. Open the display and measure its refresh; refuse a live run whose flips do not block or whose
   rate is off by more than 2 % (unless the mismatch is explicitly allowed, then journal it).
4. Claim a source_id no other session on this machine sends under, open the marker outlet (and
   the trigger port); optionally wait for a recorder.
5. Create the session folder, its lock and the journal with its header and the frozen protocol
   and trial table (or, on resume, reopen it and journal the attempt's clock epoch, the
   interrupted attempt and any accepted stimulus change).
6. Run the engine. On every exit path (completed, aborted, exception, Ctrl+C) the journal gets a
   closing line and is fsynced, and trials.csv is written from it.
"""

from __future__ import annotations

import dataclasses
import datetime as _dt
import os
import platform
import shutil
import sys
import tempfile
import time
from collections.abc import Callable
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any, Literal

from runner import __version__
from runner.contract.hashing import file_sha256
from runner.contract.layout import (
    FROZEN_PROTOCOL,
    FROZEN_TABLE,
    LOCK_NAME,
    TORN_SUFFIX,
    session_folder,
)
from runner.contract.outputs import replace_file
from runner.errors import (
    DisplayError,
    JournalError,
    RecorderError,
    SessionExistsError,
    StorageError,
    UsageError,
)
from runner.protocol.load import LoadedProtocol
from runner.protocol.schedule import Schedule, build_schedule
from runner.session.engine import AbortRequested, Engine
from runner.session.journal import JOURNAL_NAME, Journal, read_journal
from runner.session.lock import SessionLock, claim_source_id
from runner.session.markers import (
    MarkerOutlet,
    local_clock,
    make_source_id,
    source_id_candidates,
    station_name,
)
from runner.session.ports import ConsoleLike, Observer, Presenter
from runner.session.records import write_trials_csv
from runner.session.resume import (
    ResumePlan,
    SessionComplete,
    check_stimuli,
    plan_resume,
    resume_speed,
    schedule_summary,
)
from runner.session.simulate import SimulatedParticipant
from runner.session.triggers import SerialTriggers, trigger_map

SWITCH_INTERVAL_S = 0.0002
MIN_FREE_BYTES = 200 * 2**20  # room to spare: a long session's journal is a few MB


@dataclass
class RunOptions:
    participant: str
    session: str = "1"
    out: Path = Path("sessions")
    mode: Literal["live", "pilot"] = "live"
    # None: not given (1, or on --resume the session's own speed from its journal header).
    speed: float | None = None
    wait_for_recorder: float | None = None
    station: str | None = None
    abort_at: int | None = None
    resume: bool = False
    allow_timing_mismatch: bool = False
    pause_key: str | None = "p"
    trigger_port: str | None = None
    pause_at: int | None = None
    accept_changed_stimuli: bool = False


@dataclass
class RunResult:
    folder: Path
    journal: Path
    trials_csv: Path | None
    status: str
    trials_done: int
    trials_total: int
    late_flips: int = 0
    attempt: int = 1
    timing: dict[str, Any] = field(default_factory=dict)
    push_delays_us: list[float] = field(default_factory=list)
    sim_posts: list[tuple[str, float, float]] = field(default_factory=list)
    error: BaseException | None = None


def stimulus_hashes(loaded: LoadedProtocol) -> dict[str, str]:
    """sha256 of every distinct stimulus file, keyed by its path as written in the trial table."""
    out: dict[str, str] = {}
    for row in loaded.table.rows:
        if row.stimulus not in out:
            out[row.stimulus] = file_sha256(loaded.table.stimulus_path(row))
    return out


def _header(
    loaded: LoadedProtocol,
    schedule: Schedule,
    opts: RunOptions,
    presenter: Presenter,
    outlet: MarkerOutlet,
    hashes: dict[str, str],
) -> dict[str, Any]:
    model = loaded.model
    now_lsl, now_wall = local_clock(), time.time()
    return {
        "software": "trialdeck",
        "version": __version__,
        "mode": opts.mode,
        "speed": opts.speed,
        "study": model.study,
        "participant": schedule.participant,
        "session": schedule.session,
        "wall_clock_start": _dt.datetime.fromtimestamp(now_wall, _dt.UTC)
        .astimezone()
        .isoformat(timespec="milliseconds"),
        "lsl_clock_at_start": now_lsl,
        "wall_clock_unix_at_start": now_wall,
        "protocol_file": str(loaded.path),
        "protocol_hash": loaded.content_hash,
        "protocol_text": loaded.raw.decode("utf-8"),
        "trial_table_file": str(loaded.table.path),
        "trial_table_text": loaded.table.raw.decode("utf-8-sig"),
        "trial_table_columns": loaded.table.columns,
        "pages": {str(k): v for k, v in loaded.pages.items()},
        "stimulus_hashes": hashes,
        "seed": schedule.seed,
        "participant_index": schedule.participant_index,
        "schedule": schedule_summary(schedule),
        "screen": {
            "resolution": list(model.screen.resolution),
            "refresh_hz": model.screen.refresh_hz,
            "interval_s": presenter.interval,
            "flips_block": bool(presenter.blocking),
            "frame_clock": "paced" if presenter.paced else "vsync",
            "stimulus_box": [presenter.stimulus_rect.width, presenter.stimulus_rect.height],
            "video_driver": _video_driver(),
            # The real screen: the desktop's own size (None when the driver cannot tell), the
            # window's size, and the measured refresh (the protocol's screen is drawn 1:1 on it).
            "desktop_size": list(presenter.desktop_size) if presenter.desktop_size else None,
            "window_size": list(presenter.screen_size),
            "measured_hz": round(presenter.refresh.measured_hz, 4) if presenter.refresh else None,
        },
        "markers": outlet.details.as_dict(),
        "station": station_name(opts.station or model.markers.station),
        "platform": {"python": sys.version.split()[0], "system": platform.platform()},
    }


def _video_driver() -> str:
    import os

    return os.environ.get("SDL_VIDEODRIVER", "")


def _freeze(loaded: LoadedProtocol, folder: Path) -> None:
    # Written whole and renamed into place, so a kill mid-write never leaves half a copy.
    # The temporary file is created exclusively, so a link planted at NAME.tmp is never followed.
    for name, data in ((FROZEN_PROTOCOL, loaded.raw), (FROZEN_TABLE, loaded.table.raw)):
        with replace_file(folder / name, binary=True) as fh:
            fh.write(data)


def check_writable(out: Path, *, min_free: int = MIN_FREE_BYTES) -> None:
    """Refuse to start when the output folder cannot take a session.

    The nearest existing folder on the way to ``out`` must take a test file (written, fsynced
    and removed again) and have at least ``min_free`` bytes free. Nothing is created.
    """
    probe = out
    while not probe.exists():
        if probe.parent == probe:
            break
        probe = probe.parent
    if probe.exists() and not probe.is_dir():
        raise StorageError(f"{probe} is a file, so the session folder cannot be created under it.")
    try:
        fd, name = tempfile.mkstemp(prefix=".trialdeck-probe-", dir=probe)
        try:
            os.write(fd, b"probe\n")
            os.fsync(fd)
        finally:
            os.close(fd)
            os.unlink(name)
    except OSError as exc:
        raise StorageError(
            f"the folder {probe} does not take new files ({exc.strerror}); choose another --out"
            " folder or fix its permissions before starting."
        ) from None
    free = shutil.disk_usage(probe).free
    if free < min_free:
        raise StorageError(
            f"only {free // 2**20} MB are free under {probe} (at least {min_free // 2**20} MB"
            " are needed); free some space or choose another --out folder before starting."
        )


def _check_display(presenter: Presenter, opts: RunOptions, console: ConsoleLike) -> dict[str, Any]:
    """Apply the refresh check to this run: refuse, warn, or note the paced frame clock."""
    check = presenter.refresh
    if check is None:
        return {"decision": "not measured"}
    info: dict[str, Any] = {"refresh": check.as_dict()}
    problems = check.problems()
    dummy = _video_driver() in ("dummy", "offscreen")
    if dummy:
        info["decision"] = "paced"
        console.info(
            "Headless display (SDL dummy driver): flips are paced by trialdeck's frame clock at"
            f" {1.0 / check.nominal_interval_s:g} Hz."
        )
    elif not problems:
        info["decision"] = "ok"
        console.info(
            f"Display refresh measured at {check.measured_hz:.2f} Hz over {check.flips} flips"
            f" (jitter {check.jitter_ms:.2f} ms)."
        )
    elif opts.mode == "live" and not opts.allow_timing_mismatch:
        raise DisplayError(
            f"the display timing does not match the protocol: {'; '.join(problems)}. Set the"
            " display to its native resolution and the protocol's refresh rate with vsync on"
            " (see docs/lab-setup.md), or run with --allow-timing-mismatch to go on anyway."
        )
    else:
        info["decision"] = "mismatch allowed"
        info["problems"] = problems
        console.warn(f"display timing does not match the protocol: {'; '.join(problems)}.")
    return info


def _display_lost_close(engine: Engine, journal: Journal, folder: Path) -> Callable[[], None]:
    """The emergency close run when the display connection is lost (the process ends after)."""

    def close() -> None:
        t = local_clock()
        try:
            engine.emit("session_end", t, status="failed", reason="display_lost")
        finally:
            journal.on_error = None
            journal.close()  # fsyncs
            write_trials_csv(read_journal(folder / JOURNAL_NAME), folder)

    return close


def _open_journal(
    folder: Path,
    plan: ResumePlan | None,
    header: Any,
    lock: SessionLock,
) -> Journal:
    if plan is None:
        # A new session: its folder and lock come into being together, right before the journal,
        # so a refusal earlier (display, storage, recorder) leaves nothing behind.
        try:
            folder.mkdir(parents=True, exist_ok=True)
        except OSError as exc:
            raise StorageError(
                f"cannot create the session folder {folder}: {exc.strerror}."
            ) from None
        lock.create = True
        lock.acquire()
        lock.write_holder()
        return Journal.create(folder, header())
    journal = Journal.reopen(folder / JOURNAL_NAME)
    # This attempt's clock epoch first: its lines are on this process's local_clock, which after
    # a reboot restarted (runner.journal.timeline maps every attempt onto one session timeline).
    journal.append("clock_epoch", **clock_epoch(plan.attempt))
    journal.append("session_interrupted", t=local_clock(), **plan.interrupted)
    if plan.accepted_stimuli:
        journal.append(
            "stimuli_changed_accepted",
            t=local_clock(),
            attempt=plan.attempt,
            files=plan.accepted_stimuli,
        )
    journal.sync()
    return journal


def clock_epoch(attempt: int) -> dict[str, Any]:
    """The local_clock and the wall clock read together, at the start of ``attempt``."""
    t, wall = local_clock(), time.time()
    return {
        "t": t,
        "attempt": attempt,
        "wall_clock": _dt.datetime.fromtimestamp(wall, _dt.UTC)
        .astimezone()
        .isoformat(timespec="milliseconds"),
        "wall_clock_unix": wall,
    }


def _prepare_resume(
    folder: Path, loaded: LoadedProtocol, schedule: Schedule, opts: RunOptions
) -> ResumePlan | None:
    path = folder / JOURNAL_NAME
    if not opts.resume:
        if path.exists():
            raise SessionExistsError(
                f"a session already exists at {folder}; trialdeck never overwrites a session."
                " If it was interrupted, continue it with --resume; otherwise use another"
                " --session label."
            )
        return None
    if not path.exists():
        raise JournalError(f"there is no session to resume at {folder}; start it without --resume.")
    read = read_journal(path)
    if not read.records and not read.chain_errors:
        # Killed while the header was being written: nothing of the session exists yet. Keep
        # the torn bytes under another name and start afresh.
        n = 1
        while (folder / f"{JOURNAL_NAME}{TORN_SUFFIX}{n}").exists():
            n += 1
        os.replace(path, folder / f"{JOURNAL_NAME}{TORN_SUFFIX}{n}")
        return None
    try:
        return plan_resume(path, loaded, schedule)
    except SessionComplete as exc:
        # It may have been stopped after its last line but before trials.csv was written.
        write_trials_csv(read, folder)
        raise SessionComplete(f"{exc} Its trials.csv was rewritten from the journal.") from None


class WatchedMarkers:
    """The marker outlet, checking for a recorder before every marker it sends.

    A recorder that connects or drops is journaled (by ``watch``, the engine's
    ``watch_recorder``) before the marker that finds it changed, so the journal knows which
    markers went out with no consumer connected (audit counts them).
    """

    def __init__(self, outlet: MarkerOutlet):
        self.outlet = outlet
        self.watch: Callable[[float], None] | None = None

    def push(self, payload: str, timestamp: float) -> float:
        if self.watch is not None:
            self.watch(timestamp)
        return self.outlet.push(payload, timestamp)

    def have_consumers(self) -> bool:
        return self.outlet.have_consumers()


RESERVED_KEYS = frozenset({"escape", "return", "backspace", "y"} | set("0123456789"))


def check_pause_key(loaded: LoadedProtocol, key: str | None) -> None:
    """Refuse a pause key the participant also uses (answers, unsure, decision, confirm)."""
    if key is None:
        return
    ans = loaded.model.answer
    taken = RESERVED_KEYS | {ans.unsure_key, ans.decision_key}
    if key in taken or len(key) != 1 or not key.isalpha():
        raise UsageError(
            f"the pause key {key!r} cannot be used: choose a letter that is not a response key"
            f" of this protocol (not {', '.join(sorted(k for k in taken if len(k) == 1))})."
        )


def run_session(
    loaded: LoadedProtocol,
    opts: RunOptions,
    *,
    open_presenter: Callable[[], Presenter],
    console: ConsoleLike,
    observers: list[Observer] | None = None,
) -> RunResult:
    """Run one session from start to closed journal and trials.csv. See the module docstring.

    Raises
    ------
    SessionBusyError
        Another process is writing this session (a run, pilot or resume still going).
    """
    check_pause_key(loaded, opts.pause_key)
    schedule = build_schedule(loaded, opts.participant, opts.session)
    folder = session_folder(opts.out, loaded.model.study, schedule.participant, schedule.session)
    # One writer per session: an existing session is locked before its journal is read; a new
    # one when its folder is made (see _open_journal). Held until everything is written.
    # Without --resume an existing session is only probed (refused as running, or as existing).
    lock = SessionLock(
        folder / LOCK_NAME,
        what=f"the session at {folder}",
        mode=opts.mode,
        create=opts.resume,
        record=opts.resume,
    )
    try:
        if (folder / JOURNAL_NAME).exists():
            lock.acquire()
        return _run_locked(
            loaded,
            opts,
            schedule,
            folder,
            lock,
            open_presenter=open_presenter,
            console=console,
            observers=observers,
        )
    finally:
        lock.release()


def _run_locked(
    loaded: LoadedProtocol,
    opts: RunOptions,
    schedule: Schedule,
    folder: Path,
    lock: SessionLock,
    *,
    open_presenter: Callable[[], Presenter],
    console: ConsoleLike,
    observers: list[Observer] | None,
) -> RunResult:
    plan = _prepare_resume(folder, loaded, schedule, opts)
    if plan is not None:
        # A resume continues the session as it was run: same mode, same speed, same stimuli.
        opts = dataclasses.replace(opts, speed=resume_speed(plan.header, opts.mode, opts.speed))
        plan.accepted_stimuli = check_stimuli(
            plan.stimulus_hashes, loaded, accept_changed=opts.accept_changed_stimuli
        )
    elif opts.speed is None:
        opts = dataclasses.replace(opts, speed=1.0)
    speed = opts.speed if opts.speed is not None else 1.0
    check_writable(opts.out)
    codes = trigger_map(loaded)
    hashes = stimulus_hashes(loaded)
    presenter = open_presenter()
    outlet: MarkerOutlet | None = None
    sim: SimulatedParticipant | None = None
    journal: Journal | None = None
    triggers: SerialTriggers | None = None
    stream_lock: SessionLock | None = None
    try:
        timing = _check_display(presenter, opts, console)
        port = opts.trigger_port or (
            loaded.model.triggers.port if loaded.model.triggers is not None else None
        )
        if codes and port:
            assert loaded.model.triggers is not None
            triggers = SerialTriggers.open(port, codes, baud=loaded.model.triggers.baud)
            console.info(f"Trigger codes go to {port}.")
        elif codes:
            console.warn(
                "The protocol has trigger codes but no serial port: no trigger codes are sent."
                " Give triggers.port in the protocol or --trigger-port."
            )
        elif port:
            console.warn(
                f"--trigger-port {port} is ignored: the protocol has no triggers.codes to send."
            )
        station = station_name(opts.station or loaded.model.markers.station)
        # Two sessions on one machine never share a source_id: the second takes the suffixed one
        # (held like the session lock, for as long as the outlet is open).
        journaled_markers = plan.header.get("markers") if plan is not None else None
        source_id, stream_lock = claim_source_id(
            source_id_candidates(
                loaded.model.study,
                station,
                schedule.participant,
                schedule.session,
                journaled_markers.get("source_id") if isinstance(journaled_markers, dict) else None,
            ),
            mode=opts.mode,
        )
        base_id = make_source_id(loaded.model.study, station)
        if source_id != base_id and (
            not isinstance(journaled_markers, dict)
            or journaled_markers.get("source_id") != source_id
        ):
            console.warn(
                f"Another session on this machine sends markers as {base_id!r}; this one uses"
                f" {source_id!r}. Select that stream in the recorder."
            )
        outlet = MarkerOutlet(
            loaded.model.markers.stream,
            source_id,
            metadata={
                "study": loaded.model.study,
                "participant": schedule.participant,
                "session": schedule.session,
                "protocol_hash": loaded.content_hash,
                "mode": opts.mode,
            },
        )
        if opts.wait_for_recorder is not None:
            console.info(
                f"Waiting up to {opts.wait_for_recorder:g} s for a recorder to connect to '{loaded.model.markers.stream}'..."
            )
            if not outlet.wait_for_consumers(opts.wait_for_recorder):
                raise RecorderError(
                    f"no recorder connected to the marker stream '{loaded.model.markers.stream}' within"
                    f" {opts.wait_for_recorder:g} s, so the session did not start (markers sent before a"
                    " recorder connects are lost). Start the recording, check it lists the stream, and try again."
                )
        elif not outlet.have_consumers():
            console.warn(
                f"No recorder is connected to the marker stream '{loaded.model.markers.stream}' yet;"
                " markers sent before it connects are lost. Use --wait-for-recorder SECONDS to wait for it."
            )
        journal = _open_journal(
            folder,
            plan,
            lambda: {
                **_header(loaded, schedule, opts, presenter, outlet, hashes),
                "timing": timing,
                "triggers": {"port": port, "codes": codes} if triggers is not None else None,
            },
            lock,
        )
        if plan is not None:
            journal.append(
                "display_check",
                t=local_clock(),
                mode=opts.mode,
                speed=speed,
                interval_s=presenter.interval,
                markers=outlet.details.as_dict(),
                **timing,
            )
            console.info(
                f"Resuming: {len(plan.done)} of {len(schedule.trials)} trials were done; the"
                f" session goes on at attempt {plan.attempt}."
            )
        _freeze(loaded, folder)
        all_observers: list[Observer] = list(observers or [])
        if opts.mode == "pilot":
            ans = loaded.model.answer
            sim = SimulatedParticipant(
                seed=schedule.seed,
                points=loaded.model.rating.points,
                max_answer=ans.max,
                unsure_key=ans.unsure_key,
                decision_key=ans.decision_key,
                mode=ans.mode,
                speed=speed,
                post=presenter.post_key,
                clock=local_clock,
                abort_at=opts.abort_at,
                pause_at=opts.pause_at,
                pause_key=opts.pause_key or "p",
                rating_input=loaded.model.rating.input,
                settings=loaded.model.pilot,
                stimulus_limited=loaded.model.timing.stimulus_limit_s is not None,
                answer_limited=loaded.model.timing.answer_limit_s is not None,
            )
            sim.start()
            all_observers.insert(0, sim)

        def recorder_change(connected: bool) -> None:
            if connected:
                console.info("A recorder is connected to the marker stream.")
            else:
                console.warn(
                    "The recorder disconnected from the marker stream: markers are not being recorded."
                )

        watched = WatchedMarkers(outlet)
        engine = Engine(
            loaded,
            schedule,
            presenter=presenter,
            journal=journal,
            markers=watched,
            clock=local_clock,
            speed=speed,
            observers=all_observers,
            extra_row=sim.extra_row if sim is not None else None,
            on_recorder_change=recorder_change,
            skip_trials=set(plan.done) if plan is not None else None,
            pause_key=opts.pause_key,
            triggers=triggers,
            resume_attempt=plan.attempt if plan is not None and plan.attempt > 1 else None,
        )
        # Losing the display (the X server) ends the process from C: close the session first.
        presenter.on_lost = _display_lost_close(engine, journal, folder)
        # Whether a recorder listens as the attempt starts: journaled, so that audit can count
        # the markers sent while none was connected (the engine journals every change after).
        engine.state.recorder_connected = outlet.have_consumers()
        if engine.state.recorder_connected:
            journal.append("recorder_connected", t=local_clock())
        watched.watch = engine.watch_recorder
        status = "completed"
        error: BaseException | None = None
        # A short GIL switch interval bounds how long the engine can wait for the interpreter
        # after a flip or key press when another thread (the simulated participant) is running.
        old_switch = sys.getswitchinterval()
        sys.setswitchinterval(SWITCH_INTERVAL_S)
        try:
            engine.run()
        except AbortRequested:
            status = "aborted"
            t = local_clock()
            try:
                engine.emit("abort", t, status="aborted")
                engine.emit("session_end", t, status="aborted")
            except StorageError as exc:  # aborted because the journal could not be written
                error = exc
        except KeyboardInterrupt as exc:
            status, error = "interrupted", exc
            t = local_clock()
            journal.append(
                "error", t=t, kind="KeyboardInterrupt", message="interrupted with Ctrl+C"
            )
            engine.emit("session_end", t, status="interrupted")
        except BaseException as exc:
            status, error = "failed", exc
            t = local_clock()
            try:
                journal.append("error", t=t, kind=type(exc).__name__, message=str(exc))
                engine.emit("session_end", t, status="failed")
            except Exception:  # the journal itself may be what failed; the fsync below still runs
                pass
        finally:
            sys.setswitchinterval(old_switch)
            if sim is not None:
                sim.stop()
            journal.on_error = None
            try:
                journal.close()
            except StorageError as exc:
                error = error or exc
            finally:
                read = read_journal(folder / JOURNAL_NAME)
                try:
                    trials_csv: Path | None = write_trials_csv(read, folder)
                except OSError:
                    trials_csv = None
        return RunResult(
            folder=folder,
            journal=folder / JOURNAL_NAME,
            trials_csv=trials_csv,
            status=status,
            trials_done=len(engine.state.done_trials | engine.skip),
            trials_total=engine.total_trials,
            late_flips=int(presenter.late_flips),
            attempt=plan.attempt if plan is not None else 1,
            timing=timing,
            push_delays_us=engine.push_delays_us,
            sim_posts=list(sim.keys.posted) if sim is not None else [],
            error=error,
        )
    finally:
        if sim is not None:
            sim.stop()
        if triggers is not None:
            triggers.close()
        presenter.close()
        if outlet is not None:
            outlet.close()
        if stream_lock is not None:
            stream_lock.release()
