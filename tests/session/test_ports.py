"""The real presenter, console and simulated participant implement every member of their ports."""

from __future__ import annotations

import time

from conftest import MINI_PROTOCOL

from runner.protocol.load import load_protocol
from runner.session.console import Console
from runner.session.ports import ConsoleLike, Observer, Presenter
from runner.session.simulate import SimulatedParticipant


def test_display_is_a_presenter():
    """The pygame display (SDL dummy driver) has every member the Presenter protocol declares."""
    from runner.present.display import display_for

    display = display_for(load_protocol(MINI_PROTOCOL), fullscreen=False)
    try:
        assert isinstance(display, Presenter)
        assert display.refresh is not None and display.paced
    finally:
        display.close()


def test_console_and_simulated_participant_are_observers():
    """The console is an Observer and a ConsoleLike; the simulated participant is an Observer."""
    console = Console(quiet=True)
    assert isinstance(console, Observer) and isinstance(console, ConsoleLike)
    sim = SimulatedParticipant(
        seed=1,
        points=9,
        max_answer=20,
        unsure_key="u",
        decision_key="space",
        mode="after",
        speed=1.0,
        post=lambda key: 0.0,
        clock=time.monotonic,
    )
    assert isinstance(sim, Observer)
    assert not isinstance(sim, Presenter)
