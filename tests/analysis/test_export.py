"""The pooled trials table, session reading and the summary command, on real pilot sessions."""

from __future__ import annotations

import argparse
import csv
import json
import shutil
import subprocess
import sys
from pathlib import Path

import matplotlib.image
import pytest
from export_pilots import ABORTED, PARTICIPANTS, pilot_root

from runner.cli.export import add_arguments as add_export_arguments
from runner.cli.export import run as run_export
from runner.cli.summary import add_arguments as add_summary_arguments
from runner.cli.summary import run as run_summary
from runner.data.export import (
    EXPORT_EVENTS,
    SUMMARY_EVENTS,
    bids_events,
    export_sessions,
    find_session_folders,
    load_session,
    load_sessions,
    pooled_columns,
    pooled_trials,
    sessions_table,
    task_label,
)
from runner.errors import InputFileError, JournalError, UsageError
from runner.session.journal import JOURNAL_NAME, Journal, read_journal
from runner.session.records import CONTRACT_COLUMNS, EXTRA_COLUMNS

PNG_SIGNATURE = b"\x89PNG\r\n\x1a\n"


@pytest.fixture(scope="session")
def pilots(tmp_path_factory: pytest.TempPathFactory) -> Path:
    return pilot_root(tmp_path_factory.getbasetemp())


@pytest.fixture(scope="session")
def exported(pilots: Path, tmp_path_factory: pytest.TempPathFactory) -> Path:
    out = tmp_path_factory.mktemp("export")
    export_sessions([pilots], out)
    return out


def _csv(path: Path) -> list[dict[str, str]]:
    with open(path, newline="", encoding="utf-8") as fh:
        return list(csv.DictReader(fh))


@pytest.mark.slow
def test_pooled_table_agrees_with_each_sessions_trials_csv(pilots, exported):
    """Every cell of the pooled table equals the engine's per-session trials.csv for that trial.

    Source: common practice (no published source): two derivations of one journal must agree.
    """
    pooled = _csv(exported / "trials.csv")
    folders = find_session_folders([pilots])
    assert len(folders) == len(PARTICIPANTS) + 2
    seen = 0
    for folder in folders:
        own = _csv(folder / "trials.csv")
        header = read_journal(folder / JOURNAL_NAME).header
        mine = [
            r
            for r in pooled
            if r["participant"] == header["participant"] and r["session"] == header["session"]
        ]
        assert len(mine) == len(own) > 0
        for a, b in zip(mine, own, strict=True):
            assert {k: a[k] for k in b} == b
            assert a["study"] == "mini-test" and a["mode"] == "pilot"
        seen += len(own)
    assert seen == len(pooled)


@pytest.mark.slow
def test_pooled_columns_are_one_documented_order(pilots, exported):
    """The pooled header is contract, extra, table, pilot then context columns, in that order.

    Source: common practice (no published source); the order is the one docs/analysis.md lists.
    """
    with open(exported / "trials.csv", encoding="utf-8") as fh:
        header = fh.readline().rstrip("\n").split(",")
    expected = (
        list(CONTRACT_COLUMNS)
        + list(EXTRA_COLUMNS)
        + ["set", "nodes", "density", "sim_rt_ms", "study", "mode"]
    )
    assert header == expected
    assert pooled_columns(load_sessions([pilots], decode=SUMMARY_EVENTS)) == expected


@pytest.mark.slow
def test_aborted_session_keeps_only_completed_trials_and_says_so(pilots):
    """An aborted pilot counts as aborted, its pooled rows are its completed trials only, and its
    cut-short trial appears in the events with completed 0 and an unknown end.

    Source: common practice (no published source).
    """
    folder = pilots / "mini-test" / f"sub-{ABORTED}" / "ses-1"
    session = load_session(folder)
    assert session.status == "aborted"
    done = {r["trial"] for r in session.trials}
    assert done and max(done) < 5
    events = bids_events(session)
    cut = events[events["completed"] == 0]
    assert not cut.empty and set(cut["trial"]) == {max(done) + 1}
    assert events.loc[events["trial_type"] == "session", "label"].tolist() == ["aborted"]
    table = sessions_table(load_sessions([pilots], decode=SUMMARY_EVENTS))
    row = table[table["participant"] == ABORTED].iloc[0]
    assert bool(row["aborted"]) and row["n_trials"] == len(done)


@pytest.mark.slow
def test_session_length_is_start_to_end_in_the_journal(pilots):
    """duration_s is the session_end time minus the session_start time of the journal.

    Source: common practice (no published source).
    """
    for folder in find_session_folders([pilots]):
        read = read_journal(folder / JOURNAL_NAME)
        start = next(read.events("session_start"))["t"]
        end = list(read.events("session_end"))[-1]["t"]
        assert load_session(folder).duration_s == pytest.approx(end - start, abs=1e-9)


@pytest.mark.slow
@pytest.mark.parametrize("decode", [EXPORT_EVENTS, SUMMARY_EVENTS])
def test_selective_read_returns_what_the_full_read_returns(pilots, decode):
    """Reading only some events decodes those lines exactly, and keeps every other line's
    sequence number, event, time and trial.

    Source: common practice (no published source); the full line-by-line read is the reference.
    """
    for folder in find_session_folders([pilots]):
        ref = read_journal(folder / JOURNAL_NAME)
        fast = read_journal(folder / JOURNAL_NAME, decode=decode)
        assert fast.header == ref.header and not fast.chain_errors
        assert len(fast.records) == len(ref.records)
        for a, b in zip(fast.records, ref.records, strict=True):
            if b["event"] in decode or b["event"] == "header":
                assert a == b
            else:
                lead = {k: b[k] for k in ("seq", "event", "t") if k in b}
                if "t" in b and isinstance(b.get("trial"), int):
                    lead["trial"] = b["trial"]
                assert a == lead


def _copy_session(pilots: Path, tmp_path: Path, participant: str = "P02") -> Path:
    dst = tmp_path / "copy" / "mini-test" / f"sub-{participant}" / "ses-1"
    shutil.copytree(pilots / "mini-test" / f"sub-{participant}" / "ses-1", dst)
    return dst


def _edit_line(path: Path, n: int) -> None:
    lines = path.read_text(encoding="utf-8").split("\n")
    lines[n] = lines[n].replace('"t":', '"t":1', 1)
    path.write_text("\n".join(lines), encoding="utf-8")


def _drop_line(path: Path, n: int) -> None:
    lines = path.read_text(encoding="utf-8").split("\n")
    del lines[n]
    path.write_text("\n".join(lines), encoding="utf-8")


@pytest.mark.parametrize(
    ("damage", "fragment"),
    [
        (lambda p: _edit_line(p, 12), "changed after it was written"),
        (lambda p: _drop_line(p, 9), "line was removed"),
    ],
)
@pytest.mark.slow
def test_damaged_journal_is_refused(pilots, tmp_path, damage, fragment):
    """An edited or shortened journal is not exported; the error names what broke.

    Source: common practice (no published source).
    """
    folder = _copy_session(pilots, tmp_path)
    damage(folder / JOURNAL_NAME)
    with pytest.raises(JournalError, match=fragment):
        load_session(folder)


@pytest.mark.slow
def test_torn_last_line_is_tolerated(pilots, tmp_path):
    """A journal whose last line was cut mid-write (a crash) exports its intact lines.

    Source: common practice (no published source).
    """
    folder = _copy_session(pilots, tmp_path)
    path = folder / JOURNAL_NAME
    data = path.read_bytes()
    path.write_bytes(data[: len(data) - 40])
    session = load_session(folder)
    assert session.read.torn_tail
    assert session.status == "incomplete"
    assert len(session.trials) == 5


@pytest.mark.slow
def test_resumed_trial_counts_its_last_completion(pilots, tmp_path):
    """After a resume, the completed run of a trial replaces the interrupted one, in the pooled
    table and in the events, and the events number the attempts.

    Source: common practice (no published source); the journal is written with runner's Journal.
    """
    src = read_journal(pilots / "mini-test" / "sub-P03" / "ses-1" / JOURNAL_NAME)
    header = {k: v for k, v in src.header.items() if k not in ("seq", "prev", "h", "event")}
    header.pop("format")
    body = [{k: v for k, v in r.items() if k not in ("seq", "prev", "h")} for r in src.records[1:]]
    starts = [i for i, r in enumerate(body) if r["event"] == "trial_start" and r["trial"] == 3]
    # Trial 3 completes, trial 4 is cut short; the resumed attempt runs both again.
    crash = next(i for i, r in enumerate(body) if r["event"] == "rating_onset" and r["trial"] == 4)
    shift = 100.0
    folder = tmp_path / "resumed" / "mini-test" / "sub-P03" / "ses-1"
    j = Journal.create(folder, header)
    for r in body[:crash]:
        rec = dict(r)
        j.append(rec.pop("event"), **rec)
    j.append("session_resume", t=body[crash]["t"] + shift / 2)
    for r in body[starts[0] :]:
        rec = dict(r)
        rec["t"] = rec["t"] + shift
        if rec["event"] == "trial_end":
            rec["record"] = {**rec["record"], "onset_lsl": rec["record"]["onset_lsl"] + shift}
        j.append(rec.pop("event"), **rec)
    j.close()
    session = load_session(folder)
    assert [r["trial"] for r in session.trials] == [1, 2, 3, 4, 5]
    original = next(r for r in src.events("trial_end") if r["trial"] == 3)["record"]
    winner = next(r for r in session.trials if r["trial"] == 3)
    assert winner["onset_lsl"] == pytest.approx(original["onset_lsl"] + shift)
    assert len(list(session.read.events("trial_end"))) == 6
    events = bids_events(session)
    resume_t = body[crash]["t"] + shift / 2 - session.start_t
    for n in (3, 4):
        rows = events[events["trial"] == n]
        assert (rows["onset"] > resume_t).all()
        assert set(rows["attempt"]) == {2} and set(rows["completed"]) == {1}
        assert rows["trial_type"].tolist().count("stimulus") == 1
    assert events["trial_type"].tolist().count("resume") == 1


@pytest.mark.parametrize(
    ("study", "task", "expected"),
    [
        ("courier-hops", None, "courierhops"),
        ("mini-test", None, "minitest"),
        ("courier-hops", "routes2", "routes2"),
        ("courier-hops", "route-count", UsageError),
        ("courier-hops", "", UsageError),
        ("---", None, UsageError),
    ],
)
def test_task_label(study, task, expected):
    """The task label is the study id without non-alphanumerics, or a letters-and-digits --task.

    Source: BIDS specification, label format ([0-9a-zA-Z]+ without the optional +).
    """
    if expected is UsageError:
        with pytest.raises(UsageError):
            task_label(study, task)
    else:
        assert task_label(study, task) == expected


@pytest.mark.slow
def test_same_session_twice_is_refused(pilots, tmp_path):
    """Two folders holding one study, participant and session are refused before any writing.

    Source: common practice (no published source).
    """
    copy = _copy_session(pilots, tmp_path)
    with pytest.raises(InputFileError, match="give only one of them"):
        load_sessions([pilots, copy])


@pytest.mark.slow
def test_recording_count_must_match_sessions(pilots, tmp_path):
    """A --recording count other than the session count is a usage error, and nothing is written.

    Source: common practice (no published source).
    """
    out = tmp_path / "x"
    with pytest.raises(UsageError, match="one --recording per session"):
        export_sessions([pilots], out, recordings=[tmp_path / "a.xdf"])
    assert not out.exists()


def test_missing_folder_is_named(tmp_path):
    """A folder without journals gives an error naming it.

    Source: common practice (no published source).
    """
    (tmp_path / "empty").mkdir()
    with pytest.raises(InputFileError, match="no session journal"):
        find_session_folders([tmp_path / "empty"])


@pytest.mark.slow
def test_export_command_prints_what_it_wrote(pilots, tmp_path, capsys):
    """The export command writes the pooled table and one events file per session, exit code 0.

    Source: common practice (no published source).
    """
    parser = argparse.ArgumentParser()
    add_export_arguments(parser)
    args = parser.parse_args([str(pilots), "--out", str(tmp_path / "e"), "--datatype", "eeg"])
    assert run_export(args) == 0
    text = capsys.readouterr().out
    assert "Exported 5 sessions" in text and text.count("_events.tsv") == 5
    assert len(list((tmp_path / "e").glob("sub-*/ses-*/eeg/*_events.tsv"))) == 5


@pytest.mark.slow
def test_summary_command_renders_report_and_plots_from_real_pilots(pilots, tmp_path):
    """The summary of real pilots writes tables, PNG plots that decode, facts from the journals
    and a report.html with the plots inline.

    Source: PNG specification (ISO/IEC 15948) file signature; matplotlib.image.imread decodes.
    """
    parser = argparse.ArgumentParser()
    add_summary_arguments(parser)
    out = tmp_path / "summary"
    assert run_summary(parser.parse_args([str(pilots), "--out", str(out)])) == 0
    pngs = sorted(out.glob("*.png"))
    assert {p.name for p in pngs} >= {
        "outcomes_nodes.png",
        "outcomes_density.png",
        "rt_nodes.png",
        "ratings_density.png",
    }
    for png in pngs:
        assert png.read_bytes()[:8] == PNG_SIGNATURE
        assert matplotlib.image.imread(png).ndim == 3
    facts = json.loads((out / "facts.json").read_text(encoding="utf-8"))
    assert facts["n_sessions"] == 5 and facts["n_aborted"] == 1
    assert facts["n_participants"] == len(PARTICIPANTS) + 1
    html = (out / "report.html").read_text(encoding="utf-8")
    assert html.count("data:image/png;base64,") == len(pngs)
    levels = _csv(out / "levels_nodes.csv")
    assert [r["nodes"] for r in levels] == ["4", "5", "6", "7"]


def test_worker_processes_write_the_same_files(pilots, exported, tmp_path):
    """Exporting with forked worker processes writes byte-identical files to a serial export,
    and summarising the sessions with workers gives the same pooled table.

    Source: common practice (no published source); the serial export in this process is the
    reference. The workers run in a fresh single-threaded interpreter, where forking is safe.
    """
    out = tmp_path / "parallel"
    script = (
        "import sys\n"
        "from runner.data.export import export_sessions, load_sessions, pooled_trials\n"
        "from runner.data.sessions import SUMMARY_EVENTS, can_fork\n"
        "assert can_fork()\n"
        "export_sessions([sys.argv[1]], sys.argv[2], workers=2)\n"
        "s = load_sessions([sys.argv[1]], decode=SUMMARY_EVENTS, keep_records=False, workers=2)\n"
        "pooled_trials(s).to_csv(sys.argv[3], index=False)\n"
    )
    table = tmp_path / "pooled.csv"
    done = subprocess.run(
        [sys.executable, "-c", script, str(pilots), str(out), str(table)],
        capture_output=True,
        text=True,
        check=False,
    )
    assert done.returncode == 0, done.stderr
    serial = sorted(p.relative_to(exported) for p in exported.rglob("*") if p.is_file())
    parallel = sorted(p.relative_to(out) for p in out.rglob("*") if p.is_file())
    assert serial == parallel and serial
    for rel in serial:
        assert (exported / rel).read_bytes() == (out / rel).read_bytes(), rel
    ref = load_sessions([pilots], decode=SUMMARY_EVENTS, keep_records=False, workers=1)
    assert table.read_text() == pooled_trials(ref).to_csv(index=False)
