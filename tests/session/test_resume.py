"""Resume after an interruption, refusals that protect a session, and the experimenter's pause."""

from __future__ import annotations

import csv
import json
import shutil
import threading

import pylsl
import pytest
from conftest import MINI_PROTOCOL, run_pilot

from runner.cli import main
from runner.errors import JournalError, UsageError
from runner.protocol.load import load_protocol
from runner.protocol.schedule import build_schedule
from runner.session.engine import resume_index
from runner.session.journal import read_journal
from runner.session.markers import make_source_id, station_name
from runner.session.resume import SessionComplete


def _rows(path):
    with open(path, newline="") as fh:
        return list(csv.DictReader(fh))


def _folder(out, participant="P01", session="1"):
    return out / "mini-test" / f"sub-{participant}" / f"ses-{session}"


class Inlet(threading.Thread):
    """A real LSL consumer of the session's marker stream, collecting every payload."""

    def __init__(self, source_id: str):
        super().__init__(daemon=True)
        self.source_id = source_id
        self.samples: list[tuple[str, float]] = []
        self.done = threading.Event()

    def run(self) -> None:
        streams = []
        while not streams and not self.done.is_set():
            streams = pylsl.resolve_byprop("source_id", self.source_id, timeout=1.0)
        inlet = pylsl.StreamInlet(streams[0], max_buflen=60)
        inlet.open_stream(timeout=5.0)
        while not self.done.is_set():
            sample, ts = inlet.pull_sample(timeout=0.2)
            if sample is not None:
                self.samples.append((sample[0], ts))
                if json.loads(sample[0])["event"] == "session_end":
                    self.done.set()
        inlet.close_stream()


@pytest.mark.slow
def test_resume_after_abort_continues_at_first_incomplete_trial(tmp_path):
    """An aborted session resumed runs only the missing trials, after a session_resume marker that a
    real inlet receives; trials.csv then lists every scheduled trial once."""
    aborted = run_pilot(MINI_PROTOCOL, tmp_path, abort_at=3)
    assert aborted.status == "aborted" and aborted.trials_done == 2
    loaded = load_protocol(MINI_PROTOCOL)
    station = "resumestation"
    inlet = Inlet(make_source_id(loaded.model.study, station_name(station)))
    inlet.start()
    resumed = run_pilot(
        MINI_PROTOCOL, tmp_path, resume=True, station=station, wait_for_recorder=20.0
    )
    inlet.done.wait(timeout=10)
    inlet.join(timeout=5)
    assert resumed.status == "completed" and resumed.attempt == 2
    assert resumed.trials_done == resumed.trials_total == 5

    read = read_journal(resumed.journal)
    assert not read.chain_errors and not read.torn_tail
    interrupted = list(read.events("session_interrupted"))
    assert len(interrupted) == 1
    assert interrupted[0]["status"] == "aborted" and interrupted[0]["trial_in_progress"] == 3
    # The second attempt started trials 3, 4 and 5 only, and each trial ended exactly once.
    seq_resume = next(read.events("session_resume"))["seq"]
    later = [r["trial"] for r in read.records[seq_resume:] if r["event"] == "trial_start"]
    assert later == [3, 4, 5]
    assert sorted(r["trial"] for r in read.events("trial_end")) == [1, 2, 3, 4, 5]
    assert [int(r["trial"]) for r in _rows(resumed.trials_csv)] == [1, 2, 3, 4, 5]
    events = [json.loads(p)["event"] for p, _ in inlet.samples]
    assert events[0] == "session_resume" and "session_start" not in events
    assert [json.loads(p).get("trial") for p, _ in inlet.samples if '"stimulus_onset"' in p] == [
        3,
        4,
        5,
    ]


@pytest.mark.slow
def test_existing_session_without_resume_refuses_and_suggests_it(tmp_path, capsys):
    """Starting an existing session again refuses (exit 1), names --resume, and changes nothing."""
    args = ["pilot", str(MINI_PROTOCOL), "--participant", "P01", "--out", str(tmp_path)]
    assert main([*args, "--speed", "20", "--sim-abort-at", "2"]) == 1
    journal = _folder(tmp_path) / "journal.jsonl"
    before = journal.read_bytes()
    capsys.readouterr()
    assert main([*args, "--speed", "20"]) == 1
    err = capsys.readouterr().err
    assert "already exists" in err and "--resume" in err
    assert journal.read_bytes() == before


@pytest.mark.parametrize(
    "prepare, error, fragment",
    [
        ("nothing", JournalError, "no session to resume"),
        ("complete", SessionComplete, "nothing to resume"),
        ("edited", JournalError, "integrity check"),
        ("protocol", JournalError, "changed since this session started"),
    ],
)
@pytest.mark.slow
def test_resume_refusals(tmp_path, prepare, error, fragment):
    """Resume refuses a missing, completed, damaged or differently-configured session."""
    protocol = MINI_PROTOCOL
    if prepare != "nothing":
        result = run_pilot(
            MINI_PROTOCOL, tmp_path / "out", abort_at=None if prepare == "complete" else 2
        )
        journal = result.journal
        if prepare == "edited":
            lines = journal.read_text().splitlines(keepends=True)
            lines[3] = lines[3].replace('"t":', '"t":1', 1)
            journal.write_text("".join(lines))
        if prepare == "protocol":
            copy = tmp_path / "proto"
            shutil.copytree(MINI_PROTOCOL.parent, copy)
            text = (copy / "mini.yaml").read_text().replace("gap_ms: 300", "gap_ms: 350")
            (copy / "mini.yaml").write_text(text)
            protocol = copy / "mini.yaml"
    with pytest.raises(error, match=fragment):
        run_pilot(protocol, tmp_path / "out", resume=True)


@pytest.mark.slow
def test_completed_session_resume_rewrites_trials_csv(tmp_path):
    """Resuming a completed session whose trials.csv was lost rewrites it from the journal."""
    result = run_pilot(MINI_PROTOCOL, tmp_path)
    expected = result.trials_csv.read_bytes()
    result.trials_csv.unlink()
    with pytest.raises(SessionComplete):
        run_pilot(MINI_PROTOCOL, tmp_path, resume=True)
    assert result.trials_csv.read_bytes() == expected


@pytest.mark.slow
def test_journal_torn_in_its_header_is_kept_aside_and_the_session_starts(tmp_path):
    """A journal killed while writing its header holds no session: resume keeps its bytes under
    another name and starts the session from the beginning."""
    folder = _folder(tmp_path)
    folder.mkdir(parents=True)
    (folder / "journal.jsonl").write_text('{"seq":0,"prev":"000","event":"header","soft')
    result = run_pilot(MINI_PROTOCOL, tmp_path, resume=True)
    assert result.status == "completed" and result.trials_done == 5
    assert (folder / "journal.jsonl.torn1").read_text().endswith('"soft')
    read = read_journal(folder / "journal.jsonl")
    assert read.header is not None and not read.chain_errors


def test_resume_index_starts_at_the_block_of_the_first_incomplete_trial():
    """Resume skips pages, rests and breaks already passed and starts at the right block."""
    loaded = load_protocol(MINI_PROTOCOL)
    schedule = build_schedule(loaded, "P01", "1")
    items = list(schedule.items)
    kinds = [i.kind for i in items]
    blocks = [i for i, it in enumerate(items) if it.kind == "block"]
    assert resume_index(schedule, set()) == blocks[0]
    first_main = items[blocks[1]].trials[0].trial
    assert resume_index(schedule, set(range(1, first_main))) == blocks[1]
    # Half of a block done: still that block (its done trials are skipped inside it).
    assert resume_index(schedule, set(range(1, first_main + 1))) == blocks[1]
    everything = {t.trial for t in schedule.trials}
    assert resume_index(schedule, everything) == blocks[-1] + 1
    assert kinds[blocks[-1] + 1] == "page"


@pytest.mark.slow
def test_pause_between_trials_is_shown_journaled_and_marked(tmp_path):
    """The pause key pressed during trial 2 pauses after that trial: a pause page is shown, and
    pause_start / pause_end are journaled with markers; the session then completes."""
    result = run_pilot(MINI_PROTOCOL, tmp_path, pause_at=2)
    assert result.status == "completed" and result.trials_done == 5
    read = read_journal(result.journal)
    starts = list(read.events("pause_start"))
    ends = list(read.events("pause_end"))
    assert len(starts) == len(ends) == 1
    assert starts[0]["reason"] == "experimenter" and '"event":"pause_start"' in starts[0]["marker"]
    assert ends[0]["paused_s"] > 0 and "marker" in ends[0]
    # It came after trial 2 ended and before trial 3 started.
    seq = {r["event"] + str(r.get("trial")): r["seq"] for r in read.records}
    assert seq["trial_end2"] < starts[0]["seq"] < seq["trial_start3"]
    pause_flips = [
        r for r in read.events("flip") if r["kind"] == "pause" and r["view"]["type"] == "PauseView"
    ]
    assert len(pause_flips) == 1


@pytest.mark.parametrize("key", ["u", "5", "y", "return", "escape"])
def test_pause_key_that_is_a_response_key_is_refused(tmp_path, key):
    """A pause key the participant also uses (unsure, digits, confirm, Enter, Escape) is refused."""
    with pytest.raises(UsageError, match="pause key"):
        run_pilot(MINI_PROTOCOL, tmp_path, pause_key=key)


def test_resuming_without_a_journal_is_refused_before_anything_is_created(tmp_path):
    """--resume on a session that never started says so and creates no folder."""
    with pytest.raises(JournalError, match="start it without --resume"):
        run_pilot(MINI_PROTOCOL, tmp_path, resume=True)
    assert not (tmp_path / "mini-test").exists()
