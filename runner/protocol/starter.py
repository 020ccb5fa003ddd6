"""``trialdeck new FOLDER``: a small, working study to start from.

The starter holds a protocol, a welcome page, a stimulus spec and the stimuli the stimulus kit
makes from it (with their manifest, which is the trial table). ``trialdeck check`` passes on
it and ``trialdeck pilot`` completes it; every file is meant to be edited.
"""

from __future__ import annotations

import re
from dataclasses import dataclass
from pathlib import Path

from runner.errors import StorageError

PROTOCOL_NAME = "protocol.yaml"
WELCOME_NAME = "welcome.md"
STIMULI_DIR = "stimuli"
SPEC_NAME = "spec.yaml"

SPEC_TEXT = """\
# The starter's stimuli: route networks with two marked depots; the expected answer is the
# number of stops strictly between them on the shortest route. Rebuild after editing with:
#   trialdeck stimuli stimuli/spec.yaml --out stimuli --force
# docs/stimuli.md explains every field.
seed: 1
canvas:
  size_px: [700, 700]
  margin_px: 40
  background: "#8c8c8c"      # the same grey as the protocol's screen
style:
  node_color: "#141414"
  link_color: "#1e1e1e"
  node_size_px: 10
  link_width_px: 1.6
  target_shapes: [square, diamond]
  target_colors: ["#f0e442", "#56b4e9"]
  target_size_px: 26
  labels: false
readability:
  min_node_distance_px: 22
  link_clearance_px: 11
  attempts: 40
  if_unreadable: fail
count_targets: false
formats: [png]
sets:
  - name: practice
    family: random
    layout: stress
    sizes: [10]
    densities: {sparse: 1.2}
    instances: 2
    pairs: {strategy: path_length, path_links: [3, 4], max_routes: 1}
  - name: main
    family: random
    layout: stress
    sizes: [14, 20]
    densities: {sparse: 1.2, dense: 1.6}
    instances: 2
    pairs: {strategy: path_length, path_links: [3, 6], max_routes: 2}
"""

WELCOME_TEXT = """\
# Welcome

Each screen shows a network of delivery routes. Two depots are marked: one with a yellow
square, one with a blue diamond.

- Count the stops that lie between the two depots on the shortest route (do not count the
  depots).
- Press the space bar as soon as you know, then type the number and press Enter.
- Press U if you are not sure.
- Then rate how hard the trial felt.

You may stop at any time, without giving a reason: just tell the experimenter.
"""

PROTOCOL_TEXT = """\
# A starter protocol made by `trialdeck new`. Edit it, then run `trialdeck check {name}`.
# docs/protocol.md explains every setting; `trialdeck schema` prints the JSON Schema.
study: {study}
screen:
  resolution: [1920, 1080]   # the participant display's native size
  refresh_hz: 60
  width_cm: 52.7             # visible width of the display
  distance_cm: 60            # eyes to screen
  background: "#8c8c8c"
stimulus_size: {{width_deg: 20}}
markers: {{stream: {study}-markers}}
trials:
  table: stimuli/manifest.csv   # the stimulus kit's manifest is the trial table
  factors: [nodes, density]
answer:
  prompt: "How many stops lie between the two marked depots on the shortest route?"
  max: 30
  unsure_key: u
rating:
  points: 7
  question: "How hard was that?"
  low: "very easy"
  high: "very hard"
timing:
  fixation_ms: [700, 1300]
  stimulus_limit_s: 30
  answer_limit_s: 20
  gap_ms: 800
sequence:
  - page: {{file: welcome.md}}
  - practice: {{where: {{set: practice}}, feedback: true}}
  - page:
      text: |
        # That was the practice

        The real trials start now. There is no feedback from here on.
  - blocks:
      where: {{set: main}}
      by: density
      order: balanced-latin
  - page: {{text: "# Thank you\\n\\nThat is the end of the session."}}
breaks: {{every_trials: 4, min_s: 10}}
"""


@dataclass(frozen=True)
class Starter:
    """What :func:`write_starter` made: the protocol file and the number of stimuli."""

    protocol: Path
    stimuli: int


def study_id(folder: Path) -> str:
    """A study id from the folder's name: letters, digits and hyphens, at most 63."""
    name = re.sub(r"[^A-Za-z0-9]+", "-", folder.resolve().name).strip("-")[:63].strip("-")
    return name or "my-study"


def write_starter(folder: Path) -> Starter:
    """Write a starter study into ``folder`` (created; it must not hold anything yet).

    Raises
    ------
    StorageError
        ``folder`` is a file, or a folder that is not empty, or cannot be written.
    """
    from runner.graphs.build import build
    from runner.graphs.spec import load_spec

    if folder.is_symlink() or (folder.exists() and not folder.is_dir()):
        raise StorageError(f"{folder} exists and is not a folder; name a new folder.")
    if folder.is_dir() and any(folder.iterdir()):
        raise StorageError(
            f"{folder} is not empty; `trialdeck new` writes only into a new or empty folder."
        )
    try:
        folder.mkdir(parents=True, exist_ok=True)
        stimuli = folder / STIMULI_DIR
        stimuli.mkdir()
        (stimuli / SPEC_NAME).write_text(SPEC_TEXT, encoding="utf-8")
        (folder / WELCOME_NAME).write_text(WELCOME_TEXT, encoding="utf-8")
        protocol = folder / PROTOCOL_NAME
        protocol.write_text(
            PROTOCOL_TEXT.format(study=study_id(folder), name=protocol), encoding="utf-8"
        )
    except OSError as exc:
        raise StorageError(f"cannot write the starter into {folder}: {exc.strerror}.") from None
    rows = build(load_spec(stimuli / SPEC_NAME), stimuli)
    return Starter(protocol, len(rows))
