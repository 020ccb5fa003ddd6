"""A recorded marker stream names the session that sent it; mismatches name whose it is."""

from __future__ import annotations

import re
import uuid

from xdfwrite import FixtureStream, write_xdf

from runner.recording.identity import compare_identity
from runner.recording.xdf import read_recording
from runner.session.markers import MarkerOutlet

HEADER = {"study": "courier-hops", "participant": "P01", "session": "1", "protocol_hash": "ab12"}


def _outlet_desc(identity: dict[str, str]) -> str:
    """The inner XML of <desc> exactly as a real trialdeck marker outlet describes itself."""
    outlet = MarkerOutlet(
        "identity-test",
        f"identity-test-{uuid.uuid4().hex[:8]}",
        metadata=identity | {"mode": "run"},
    )
    try:
        xml = outlet.info.as_xml()
    finally:
        outlet.close()
    return re.search(r"<desc>(.*)</desc>", xml, flags=re.S).group(1)


def _recording(tmp_path, identity):
    marker = FixtureStream(
        1,
        "courier-hops-markers",
        "Markers",
        "string",
        0.0,
        [10.0, 11.0],
        ['{"event":"session_start"}', '{"event":"page_onset"}'],
        source_id="trialdeck:courier-hops:station",
        desc_xml=_outlet_desc(identity),
    )
    return read_recording(write_xdf(tmp_path / "rec.xdf", [marker]))


def test_identity_from_a_real_outlet_reads_back_through_pyxdf(tmp_path):
    """The outlet's desc/session fields come back from the XDF file as the stream's identity.

    Source: liblsl's StreamInfo.as_xml() for the header text, pyxdf.load_xdf as the reader.
    """
    rec = _recording(tmp_path, HEADER)
    stream = rec.streams[0]
    assert {k: stream.identity[k] for k in HEADER} == HEADER
    check = compare_identity(stream.identity, HEADER)
    assert check.known and check.matches


def test_another_participants_recording_is_named_as_such(tmp_path):
    """A recording sent by P02's session is reported as P02's, naming the differing fields."""
    rec = _recording(tmp_path, HEADER | {"participant": "P02", "protocol_hash": "cd34"})
    check = compare_identity(rec.streams[0].identity, HEADER)
    assert not check.matches
    assert [d[0] for d in check.differences] == ["participant", "protocol_hash"]
    assert "participant P02, session 1 of study courier-hops" in check.describe()


def test_a_stream_without_identity_is_not_judged_by_it():
    """Streams of older versions carry no identity: nothing is compared, nothing refused."""
    check = compare_identity({}, HEADER)
    assert not check.known and not check.differences
