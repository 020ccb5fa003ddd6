"""The physio configuration: which streams to use and which windows to measure, relative to events.

One pydantic model, :class:`PhysioConfig`, read from its own YAML file (``--config physio.yaml``)
or from the protocol's optional ``physio:`` section. Every window is written relative to a
journaled event of the trial (:data:`TRIAL_EVENTS`), so the same file serves any protocol.
Defaults (docs/physio.md, "Configuration"):

* pupil baseline: the last 500 ms before stimulus onset (the end of the fixation screen);
* pupil window: stimulus onset to the answer, at most 10 s;
* heart rate window: stimulus onset to the answer, at most 30 s;
* EEG epoch: 0 to 2 s after stimulus onset;
* HRV: every block, rest and break, from its start marker to its end marker.

This module needs only pydantic, so the protocol model can embed it without loading numpy.
"""

from __future__ import annotations

from pathlib import Path
from typing import Literal

from pydantic import BaseModel, ConfigDict, Field, ValidationError, field_validator, model_validator

# The journaled trial events a window may start or end at.
from runner.contract.events import TRIAL_EVENTS

__all__ = [
    "TRIAL_EVENTS",
    "CardiacConfig",
    "EEGConfig",
    "PhysioConfig",
    "PupilConfig",
    "StreamChoice",
    "Streams",
    "Window",
    "load_config",
]

TrialEvent = Literal[
    "fixation_onset",
    "stimulus_onset",
    "decision",
    "stimulus_offset",
    "answer_onset",
    "answer",
    "rating_onset",
    "rating",
    "feedback_onset",
    "gap_onset",
]
#: Periods of physio_blocks.csv and the journal events that open and close them.
PERIOD_EVENTS: dict[str, tuple[str, str]] = {
    "block": ("block_start", "block_end"),
    "rest": ("rest_start", "rest_end"),
    "break": ("break_start", "break_end"),
}
PeriodKind = Literal["block", "rest", "break"]
PERIOD_KINDS: tuple[PeriodKind, ...] = ("block", "rest", "break")
MAX_WINDOW_S = 3600.0


class _Strict(BaseModel):
    """Unknown keys are errors and values are not coerced silently (as in the protocol)."""

    model_config = ConfigDict(extra="forbid", frozen=True)


class Window(_Strict):
    """A time window of one trial: from ``start`` (+ ``offset_s``) for ``duration_s`` seconds, or
    to ``end`` (+ ``end_offset_s``), cut to at most ``max_s`` seconds."""

    start: TrialEvent = Field(description="the trial event the window starts at")
    offset_s: float = Field(0.0, ge=-MAX_WINDOW_S, le=MAX_WINDOW_S)
    duration_s: float | None = Field(None, gt=0, le=MAX_WINDOW_S)
    end: TrialEvent | None = Field(None, description="the trial event the window ends at")
    end_offset_s: float = Field(0.0, ge=-MAX_WINDOW_S, le=MAX_WINDOW_S)
    max_s: float | None = Field(None, gt=0, le=MAX_WINDOW_S)

    @model_validator(mode="after")
    def _one_end(self) -> Window:
        if (self.duration_s is None) == (self.end is None):
            raise ValueError("give either duration_s or end")
        return self


class StreamChoice(_Strict):
    """How one kind of stream is found in the recording: by type (any of ``types``, compared
    without case), narrowed by ``name`` when several match; ``channel`` picks one channel by its
    label (pupil, ECG, photodiode)."""

    types: list[str] = Field(min_length=1, description="stream types to look for, such as [EEG]")
    name: str | None = Field(None, description="the stream's name, when several streams match")
    channel: str | None = Field(None, description="the channel label to use")


class Streams(_Strict):
    eeg: StreamChoice = StreamChoice(types=["EEG"])
    pupil: StreamChoice = StreamChoice(types=["Pupil", "Gaze", "EyeTracker", "Eyetracking"])
    ecg: StreamChoice = StreamChoice(types=["ECG", "EKG"])
    rr: StreamChoice = StreamChoice(types=["RR", "HRV"])
    photodiode: StreamChoice = StreamChoice(types=["Photodiode", "Light"])


class PupilConfig(_Strict):
    """Pupil windows and cleaning (cleaning numbers: runner.physio.pupil.PupilSettings)."""

    enabled: bool = True
    baseline: Window = Window(start="stimulus_onset", offset_s=-0.5, duration_s=0.5)
    window: Window = Window(start="stimulus_onset", end="answer", max_s=10.0)
    max_interpolated_share: float = Field(0.5, ge=0, le=1)
    max_gap_s: float = Field(0.5, gt=0, le=10)
    baseline_z: float = Field(3.5, gt=0, le=100)


class CardiacConfig(_Strict):
    """Heart rate per trial and HRV per block, rest and break."""

    enabled: bool = True
    window: Window = Window(start="stimulus_onset", end="answer", max_s=30.0)
    periods: list[PeriodKind] = Field(default_factory=lambda: list(PERIOD_KINDS))


class EEGConfig(_Strict):
    """EEG epochs, cleaning and band power per channel group."""

    enabled: bool = True
    epoch: Window = Window(start="stimulus_onset", offset_s=0.0, duration_s=2.0)
    reference: str | list[str] = "average"
    reject_peak_to_peak_uv: float = Field(150.0, gt=0, le=100000)
    flat_uv: float = Field(1.0, ge=0, le=1000)
    bad_channel_z: float = Field(5.0, gt=0, le=100)
    l_freq: float = Field(1.0, ge=0, le=1000)
    h_freq: float = Field(40.0, gt=0, le=1000)
    bands: dict[str, tuple[float, float]] = Field(
        default_factory=lambda: {"theta": (4.0, 8.0), "alpha": (8.0, 13.0)},
        description="band names mapped to [low, high] in Hz",
    )
    groups: dict[str, list[str]] = Field(
        default_factory=lambda: {
            "frontal": ["Fz", "F3", "F4", "FCz"],
            "parietal": ["Pz", "P3", "P4", "POz"],
        },
        description="channel-group names mapped to lists of channel labels",
    )
    min_epochs_per_condition: int = Field(
        20, ge=1, le=100000, description="fewest trials per condition `check` accepts"
    )

    @field_validator("bands")
    @classmethod
    def _bands(cls, v: dict[str, tuple[float, float]]) -> dict[str, tuple[float, float]]:
        for name, (low, high) in v.items():
            if not (name.isascii() and name.isalnum()):
                raise ValueError(f"the band name {name!r} must be letters and digits only")
            if not 0 <= low < high:
                raise ValueError(f"band {name!r}: expected 0 <= low < high, got [{low}, {high}]")
        return v

    @field_validator("groups")
    @classmethod
    def _groups(cls, v: dict[str, list[str]]) -> dict[str, list[str]]:
        for name, chans in v.items():
            if not (name.isascii() and name.isalnum()):
                raise ValueError(f"the group name {name!r} must be letters and digits only")
            if not chans:
                raise ValueError(f"the channel group {name!r} is empty")
        return v


class PhysioConfig(_Strict):
    """Settings of ``trialdeck physio``: streams, pupil, cardiac and EEG."""

    streams: Streams = Streams()
    pupil: PupilConfig = PupilConfig()
    cardiac: CardiacConfig = CardiacConfig()
    eeg: EEGConfig = EEGConfig()


def load_config(path: str | Path) -> PhysioConfig:
    """Read a physio configuration file (safe YAML, every problem with FILE:LINE:COL).

    Raises
    ------
    InputFileError
        The file is missing or unreadable.
    ProtocolError
        The YAML is broken or a setting is not allowed (one problem per setting).
    """
    from runner.contract.layout import display_path
    from runner.errors import InputFileError, ProtocolError
    from runner.protocol.report import problems_from_validation
    from runner.protocol.yamlsafe import read_yaml

    path = Path(path)
    if not path.is_file():
        raise InputFileError(
            f"the physio configuration {path} does not exist or is not a file; check the path."
        )
    doc = read_yaml(path)
    try:
        return PhysioConfig.model_validate(doc.data)
    except ValidationError as exc:
        raise ProtocolError(
            problems_from_validation(exc, file=display_path(path), doc=doc, model=PhysioConfig)
        ) from None
