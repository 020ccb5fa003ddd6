"""The marker outlet, checked with a real pylsl inlet on this machine."""

from __future__ import annotations

import json
import uuid

import pylsl

from runner.session.events import encode_marker
from runner.session.markers import MarkerOutlet, local_clock


def test_outlet_contract_and_exact_timestamps():
    """Type Markers, one string channel, irregular rate, our source_id, metadata in desc(), and
    explicitly passed timestamps arrive unchanged.

    Source: the liblsl/pylsl API documentation (stream info fields; push_sample timestamp argument).
    """
    source_id = f"trialdeck:test:{uuid.uuid4().hex[:8]}"
    outlet = MarkerOutlet(
        "test-markers", source_id, metadata={"study": "unit", "protocol_hash": "abc"}
    )
    found = pylsl.resolve_byprop("source_id", source_id, timeout=5)
    assert len(found) == 1
    inlet = pylsl.StreamInlet(found[0])
    info = inlet.info(timeout=5)
    assert (info.type(), info.channel_count(), info.channel_format()) == (
        "Markers",
        1,
        pylsl.cf_string,
    )
    assert info.nominal_srate() == pylsl.IRREGULAR_RATE and info.source_id() == source_id
    assert info.desc().child("session").child_value("protocol_hash") == "abc"
    inlet.open_stream(timeout=5)
    inlet.time_correction(timeout=5)
    assert outlet.wait_for_consumers(5)
    sent = []
    for k in range(5):
        t = local_clock() - 0.01 * k
        payload = encode_marker("stimulus_onset", trial=k + 1, stimulus=f"s{k}.png")
        outlet.push(payload, t)
        sent.append((payload, t))
    got = [inlet.pull_sample(timeout=5) for _ in sent]
    assert [(s[0], ts) for s, ts in got] == sent
    assert json.loads(got[0][0][0]) == {"event": "stimulus_onset", "trial": 1, "stimulus": "s0.png"}
    outlet.close()
