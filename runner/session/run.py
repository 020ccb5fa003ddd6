"""Start, run and close one session: the order of the steps is what keeps data safe.

1. Load and schedule (bad input stops here; nothing has been created).
2. Refuse an existing session folder.
3. Open the display and the marker outlet; optionally wait for a recorder.
4. Create the journal with its header and the frozen protocol and trial table.
5. Run the engine. On every exit path (completed, aborted, exception, Ctrl+C) the journal gets a
   closing line and is fsynced, and trials.csv is written from it.
"""

from __future__ import annotations

import datetime as _dt
import hashlib
import platform
import shutil
import sys
from collections.abc import Callable
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any, Literal

from runner import __version__
from runner.errors import RecorderError, SessionExistsError, StorageError
from runner.protocol.load import LoadedProtocol
from runner.protocol.schedule import Schedule, build_schedule
from runner.session.engine import AbortRequested, Engine
from runner.session.journal import JOURNAL_NAME, Journal, read_journal
from runner.session.markers import MarkerOutlet, local_clock, make_source_id, station_name
from runner.session.records import write_trials_csv
from runner.session.simulate import SimulatedParticipant
from runner.session.views import Presenter

FROZEN_PROTOCOL = "protocol.yaml"
FROZEN_TABLE = "trial_table.csv"
HASH_CHUNK = 1 << 20
SWITCH_INTERVAL_S = 0.0002


@dataclass
class RunOptions:
    participant: str
    session: str = "1"
    out: Path = Path("sessions")
    mode: Literal["live", "pilot"] = "live"
    speed: float = 1.0
    wait_for_recorder: float | None = None
    station: str | None = None
    abort_at: int | None = None


@dataclass
class RunResult:
    folder: Path
    journal: Path
    trials_csv: Path | None
    status: str
    trials_done: int
    trials_total: int
    late_flips: int = 0
    push_delays_us: list[float] = field(default_factory=list)
    sim_posts: list[tuple[str, float, float]] = field(default_factory=list)
    error: BaseException | None = None


class ConsoleLike:
    """What the session needs from the experimenter console (see runner.session.console)."""

    def info(self, text: str) -> None: ...

    def warn(self, text: str) -> None: ...


def session_folder(out: Path, study: str, participant: str, session: str) -> Path:
    """**Contract.** ``<out>/<study>/sub-<participant>/ses-<session>/``."""
    return out / study / f"sub-{participant}" / f"ses-{session}"


def file_sha256(path: Path) -> str:
    digest = hashlib.sha256()
    with open(path, "rb") as fh:
        while chunk := fh.read(HASH_CHUNK):
            digest.update(chunk)
    return digest.hexdigest()


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
    import pandas  # noqa: F401  (only to record its version)

    model = loaded.model
    now_lsl = local_clock()
    return {
        "software": "trialdeck",
        "version": __version__,
        "mode": opts.mode,
        "speed": opts.speed,
        "study": model.study,
        "participant": schedule.participant,
        "session": schedule.session,
        "wall_clock_start": _dt.datetime.now(_dt.UTC)
        .astimezone()
        .isoformat(timespec="milliseconds"),
        "lsl_clock_at_start": now_lsl,
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
        "schedule": [
            {
                "trial": t.trial,
                "part": t.part,
                "block": t.block,
                "row": t.row,
                "stimulus": t.stimulus,
                "fixation_ms": t.fixation_ms,
            }
            for t in schedule.trials
        ],
        "screen": {
            "resolution": list(model.screen.resolution),
            "refresh_hz": model.screen.refresh_hz,
            "interval_s": presenter.interval,
            "flips_block": bool(getattr(presenter, "blocking", False)),
            "stimulus_box": list(getattr(presenter, "stimulus_rect", (0, 0, 0, 0))[2:]),
            "video_driver": _video_driver(),
        },
        "markers": outlet.details.as_dict(),
        "station": station_name(opts.station or model.markers.station),
        "platform": {"python": sys.version.split()[0], "system": platform.platform()},
    }


def _video_driver() -> str:
    import os

    return os.environ.get("SDL_VIDEODRIVER", "")


def _freeze(loaded: LoadedProtocol, folder: Path) -> None:
    (folder / FROZEN_PROTOCOL).write_bytes(loaded.raw)
    (folder / FROZEN_TABLE).write_bytes(loaded.table.raw)


def check_writable(out: Path) -> None:
    """Refuse to start when the output folder cannot take a session (without creating it)."""
    probe = out
    while not probe.exists():
        if probe.parent == probe:
            break
        probe = probe.parent
    if probe.exists() and not probe.is_dir():
        raise StorageError(f"{probe} is a file, so the session folder cannot be created under it.")
    free = shutil.disk_usage(probe).free
    if free < 50 * 2**20:
        raise StorageError(
            f"only {free // 2**20} MB are free under {probe}; free some space before starting."
        )


def run_session(
    loaded: LoadedProtocol,
    opts: RunOptions,
    *,
    open_presenter: Callable[[], Presenter],
    console: ConsoleLike,
    observers: list[Any] | None = None,
) -> RunResult:
    """Run one session from start to closed journal and trials.csv. See the module docstring."""
    schedule = build_schedule(loaded, opts.participant, opts.session)
    folder = session_folder(opts.out, loaded.model.study, schedule.participant, schedule.session)
    if (folder / JOURNAL_NAME).exists():
        raise SessionExistsError(
            f"a session already exists at {folder}; trialdeck never overwrites a session."
            " Use another --session label."
        )
    check_writable(opts.out)
    hashes = stimulus_hashes(loaded)
    presenter = open_presenter()
    outlet: MarkerOutlet | None = None
    sim: SimulatedParticipant | None = None
    journal: Journal | None = None
    try:
        station = station_name(opts.station or loaded.model.markers.station)
        outlet = MarkerOutlet(
            loaded.model.markers.stream,
            make_source_id(loaded.model.study, station),
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
        header = _header(loaded, schedule, opts, presenter, outlet, hashes)
        journal = Journal.create(folder, header)
        _freeze(loaded, folder)
        all_observers = list(observers or [])
        if opts.mode == "pilot":
            ans = loaded.model.answer
            sim = SimulatedParticipant(
                seed=schedule.seed,
                points=loaded.model.rating.points,
                max_answer=ans.max,
                unsure_key=ans.unsure_key,
                decision_key=ans.decision_key,
                mode=ans.mode,
                speed=opts.speed,
                post=presenter.post_key,
                clock=local_clock,
                abort_at=opts.abort_at,
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

        engine = Engine(
            loaded,
            schedule,
            presenter=presenter,
            journal=journal,
            markers=outlet,
            clock=local_clock,
            speed=opts.speed,
            observers=all_observers,
            extra_row=sim.extra_row if sim is not None else None,
            on_recorder_change=recorder_change,
        )
        status, error = "completed", None
        # A short GIL switch interval bounds how long the engine can wait for the interpreter
        # after a flip or key press when another thread (the simulated participant) is running.
        old_switch = sys.getswitchinterval()
        sys.setswitchinterval(SWITCH_INTERVAL_S)
        try:
            engine.run()
        except AbortRequested:
            status = "aborted"
            t = local_clock()
            engine.emit("abort", t, status="aborted")
            engine.emit("session_end", t, status="aborted")
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
            try:
                journal.close()
            finally:
                read = read_journal(folder / JOURNAL_NAME)
                trials_csv = write_trials_csv(read, folder)
        return RunResult(
            folder=folder,
            journal=folder / JOURNAL_NAME,
            trials_csv=trials_csv,
            status=status,
            trials_done=len(engine.state.done_trials),
            trials_total=engine.total_trials,
            late_flips=int(getattr(presenter, "late_flips", 0)),
            push_delays_us=engine.push_delays_us,
            sim_posts=list(sim.keys.posted) if sim is not None else [],
            error=error,
        )
    finally:
        if sim is not None:
            sim.stop()
        presenter.close()
        if outlet is not None:
            outlet.close()
