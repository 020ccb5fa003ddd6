"""Tests for the safe YAML reader: refusals with positions, value rules, marks, files."""

from __future__ import annotations

import datetime
import math
import time
from pathlib import Path

import pytest
import yaml

from runner.errors import InputFileError, ProtocolError
from runner.protocol.yamlsafe import MAX_DEPTH, line_col, read_yaml, read_yaml_text

DEEP = MAX_DEPTH + 6

# (text, expected line, expected column, problem code). Positions are 1-based and
# were worked out by hand from the text (0, 0 means the file as a whole).
MALFORMED = [
    ("", 0, 0, "empty-file"),
    ("# only a comment\n   # and another\n", 0, 0, "empty-file"),
    ("- depot-a\n- depot-b\n", 1, 1, "not-a-mapping"),
    ("courier\n", 1, 1, "not-a-mapping"),
    ("~\n", 1, 1, "not-a-mapping"),
    ("study: a\nscreen: 1\nstudy: b\n", 3, 1, "duplicate-key"),
    ("timing:\n  gap_ms: 1\n  limit_s: 2\n  gap_ms: 3\n", 4, 3, "duplicate-key"),
    ("timing: {gap_ms: 1, gap_ms: 2}\n", 1, 21, "duplicate-key"),
    ("timing:\n\tgap_ms: 1\n", 2, 1, "yaml-tab"),
    ("timing:\n  gap_ms: 1\n  \tlimit_s: 2\n", 3, 3, "yaml-tab"),
    ("study:\tcourier\n", 1, 7, "yaml-tab"),
    ("sequence:\n  -\tpage\n", 2, 4, "yaml-tab"),
    ("study: &s courier\nname: *s\n", 1, 8, "yaml-anchor"),
    ("study: *s\n", 1, 8, "yaml-alias"),
    ("base: &b {gap_ms: 1}\n", 1, 7, "yaml-anchor"),
    ("timing:\n  <<: {gap_ms: 1}\n", 2, 3, "yaml-merge-key"),
    ("study: depot: north\n", 1, 13, "yaml-syntax"),
    # An unclosed quote or bracket is placed where it opened, not where the parser gave up.
    ("study: a\nprompt: 'How many stops?\n", 2, 9, "yaml-syntax"),
    ("screen: [1920, 1080\n", 1, 9, "yaml-syntax"),
    ("screen:\n  resolution: [800, 600\n  refresh_hz: 60\n", 2, 15, "yaml-syntax"),
    ("screen: {resolution: [800, 600],\n  refresh_hz: 60\nmarkers: 1\n", 1, 9, "yaml-syntax"),
    ("study: a\n---\nstudy: b\n", 2, 1, "yaml-syntax"),
    ('prompt: "stops \\q"\n', 1, 17, "yaml-syntax"),
    ("? [a, b]\n: 1\n", 1, 3, "bad-key"),
    ("? {a: 1}\n: 2\n", 1, 3, "bad-key"),
    ('"": 1\n', 1, 1, "bad-key"),
    ("!!int 7: x\n", 1, 1, "yaml-tag"),
    ("study: !!python/object/apply:os.system [ls]\n", 1, 8, "yaml-tag"),
    ("logo: !!binary aGk=\n", 1, 7, "yaml-tag"),
    ("factors: !!set {nodes, density}\n", 1, 10, "yaml-tag"),
    ("study: !courier x\n", 1, 8, "yaml-tag"),
    ("day: !!timestamp 2024-05-01\n", 1, 6, "yaml-tag"),
    ("gap_ms: !!int ten\n", 1, 9, "yaml-tag"),
    ("study: depot\x07\n", 1, 13, "bad-character"),
    ("a: 1\nb: 2\nc: x\x00y\n", 3, 5, "bad-character"),
    # The top-level mapping is level 1, so bracket number MAX_DEPTH (column 3 + MAX_DEPTH) is
    # the first one too deep.
    ("a: " + "[" * DEEP + "]" * DEEP + "\n", 1, 3 + MAX_DEPTH, "too-deep"),
    ("timing:\n  gap_ms: 1\n limit_s: 2\n", 3, 2, "yaml-syntax"),
]


@pytest.mark.parametrize(("text", "line", "column", "code"), MALFORMED)
def test_malformed_yaml_is_refused_at_the_right_place(text, line, column, code):
    """Each malformed text raises one ProtocolError pointing at the offending line and column.

    Source: YAML 1.2.2 specification (sections 6.1 tabs in indentation, 3.2.1.3 unique keys,
    6.9.2 node anchors); positions and refusals that are trialdeck policy are worked by hand.
    """
    with pytest.raises(ProtocolError) as caught:
        read_yaml_text(text, filename="courier.yaml")
    problems = caught.value.problems
    assert len(problems) == 1, [p.format() for p in problems]
    problem = problems[0]
    assert (problem.line, problem.column) == (line, column), problem.format()
    assert problem.code == code
    assert problem.file == "courier.yaml"
    assert problem.format().startswith(f"courier.yaml:{line}:{column}: error: ")


def test_every_duplicate_and_bad_tag_is_reported_at_once():
    """Problems found while building values are all collected, in file order."""
    text = "a: 1\na: 2\nb: !!binary aGk=\nc:\n  d: 1\n  d: 2\n"
    with pytest.raises(ProtocolError) as caught:
        read_yaml_text(text, filename="p.yaml")
    positions = [(p.line, p.column, p.code) for p in caught.value.problems]
    assert positions == [(2, 1, "duplicate-key"), (3, 4, "yaml-tag"), (6, 3, "duplicate-key")]
    assert caught.value.lines()[0] == (
        "p.yaml:2:1: error: The key 'a' appears twice in the same mapping (first on line 1); "
        "keep only one of them."
    )


def test_billion_laughs_is_refused_in_well_under_a_second():
    """A nine-level alias bomb is refused at its first anchor, before anything is expanded.

    Source: the "billion laughs" entity-expansion attack (CVE-2003-1564), here in YAML form.
    """
    lines = ['lol0: &lol0 "lol"']
    for level in range(1, 10):
        refs = ", ".join([f"*lol{level - 1}"] * 10)
        lines.append(f"lol{level}: &lol{level} [{refs}]")
    text = "\n".join(lines) + "\n"
    start = time.perf_counter()
    with pytest.raises(ProtocolError) as caught:
        read_yaml_text(text, filename="bomb.yaml")
    elapsed = time.perf_counter() - start
    assert elapsed < 1.0
    (problem,) = caught.value.problems
    assert (problem.line, problem.column, problem.code) == (1, 7, "yaml-anchor")


def test_alias_bomb_without_a_leading_anchor_is_refused_at_the_first_alias():
    """Aliases are refused even where the anchor that defines them comes later in the file."""
    text = "first: [*a, *a]\n" + "\n".join(f"x{i}: {i}" for i in range(3)) + "\n"
    with pytest.raises(ProtocolError) as caught:
        read_yaml_text(text, filename="bomb.yaml")
    (problem,) = caught.value.problems
    assert (problem.line, problem.column, problem.code) == (1, 9, "yaml-alias")


# Plain scalar text -> value under trialdeck's rules.
SCALARS = [
    ("courier", "courier"),
    ("yes", "yes"),
    ("No", "No"),
    ("on", "on"),
    ("OFF", "OFF"),
    ("true", True),
    ("False", False),
    ("TRUE", True),
    ("~", None),
    ("null", None),
    ("NULL", None),
    ("", None),
    ("12", 12),
    ("-3", -3),
    ("+7", 7),
    ("012", 12),
    ("0o14", 12),
    ("0x1F", 31),
    ("1.5", 1.5),
    ("-.5", -0.5),
    ("1e3", 1000.0),
    ("2.5E-2", 0.025),
    (".inf", math.inf),
    ("-.Inf", -math.inf),
    ("1:30", "1:30"),
    ("2024-05-01", "2024-05-01"),
    ("2024-05-01 09:30:00", "2024-05-01 09:30:00"),
    ("1_000", "1_000"),
    ("0b101", "0b101"),
    ("'yes'", "yes"),
    ("'12'", "12"),
    ('"true"', "true"),
    ("!!str 12", "12"),
    ("!!float 1", 1.0),
    ("!!int 0x10", 16),
    ("!!bool false", False),
    ("!!null ~", None),
]


@pytest.mark.parametrize(("scalar", "expected"), SCALARS)
def test_plain_values_follow_the_yaml_12_core_schema(scalar, expected):
    """Plain scalars resolve by the YAML 1.2 core schema; dates, times and yes/no stay text.

    Source: YAML 1.2.2 specification, section 10.3.2 (core schema tag resolution).
    """
    data = read_yaml_text(f"value: {scalar}\n").data
    assert data["value"] == expected
    assert type(data["value"]) is type(expected)


def test_nan_is_a_float():
    """The YAML 1.2 core spelling .nan reads as a float NaN.

    Source: YAML 1.2.2 specification, section 10.3.2 (core schema tag resolution).
    """
    assert math.isnan(read_yaml_text("value: .nan\n").data["value"])


def test_keys_stay_text_where_pyyaml_would_turn_them_into_other_types():
    """Keys such as on, yes, 1, a date or ~ are read as the text written, unlike PyYAML.

    Source: PyYAML SafeLoader (YAML 1.1 resolution) as the contrast.
    """
    text = "on: 1\nyes: 2\n1: 3\n2024-05-01: 4\n~: 5\n"
    assert list(read_yaml_text(text).data) == ["on", "yes", "1", "2024-05-01", "~"]
    # PyYAML makes on, yes and 1 all equal to True, so three settings collapse into one.
    assert yaml.safe_load(text) == {True: 3, datetime.date(2024, 5, 1): 4, None: 5}


PROTOCOL = """\
# Parcel courier: dispatchers count the stops between two depots.
study: courier-hops
screen: {resolution: [1920, 1080], refresh_hz: 60, width_cm: 52.7, background: "#808080"}
trials: {table: ../stimuli_demo/manifest.csv, factors: [nodes, density]}
answer:
  prompt: "How many stops lie on the shortest route?"
  max: 60
  unsure_key: u
timing:
  fixation_ms: [700, 1300]
  gap_ms: 800
sequence:
  - page: {text: "Welcome, dispatcher."}
  - rest: {seconds: 60, label: baseline}
  - practice:
      where: {set: practice}
      feedback: true
  - blocks: {by: density, order: balanced-latin}
notes: |
  Depot maps are invented.
  Stops are numbered.
"""


def test_unambiguous_protocol_reads_the_same_as_pyyaml():
    """A protocol without YAML 1.1 surprises gives the same data as PyYAML's safe_load.

    Source: PyYAML yaml.safe_load as the reference reader.
    """
    assert read_yaml_text(PROTOCOL).data == yaml.safe_load(PROTOCOL)


def _position(text: str, line_fragment: str, token: str) -> tuple[int, int]:
    """1-based (line, column) of ``token`` on the first line containing ``line_fragment``."""
    for number, line in enumerate(text.splitlines(), start=1):
        if line_fragment in line:
            return number, line.index(token) + 1
    raise AssertionError(f"{line_fragment!r} not in text")


@pytest.mark.parametrize(
    ("path", "key_at", "value_at"),
    [
        (("study",), ("study:", "study"), ("study:", "courier-hops")),
        (("screen", "resolution"), ("screen:", "resolution"), ("screen:", "[1920")),
        (("screen", "resolution", 1), ("screen:", "1080"), ("screen:", "1080")),
        (("answer",), ("answer:", "answer"), ("prompt:", "prompt")),
        (("answer", "max"), ("max:", "max"), ("max:", "60")),
        (("timing", "fixation_ms"), ("fixation_ms", "fixation_ms"), ("fixation_ms", "[700")),
        (("timing", "fixation_ms", 1), ("fixation_ms", "1300"), ("fixation_ms", "1300")),
        (("sequence", 2), ("- practice", "practice"), ("- practice", "practice")),
        (("sequence", 2, "practice", "feedback"), ("feedback", "feedback"), ("feedback", "true")),
        (("sequence", 3, "blocks", "order"), ("- blocks", "order"), ("- blocks", "balanced")),
        (("notes",), ("notes:", "notes"), ("notes:", "|")),
    ],
)
def test_marks_point_at_keys_and_values(path, key_at, value_at):
    """Each key path maps to the 1-based position of its key and of its value in the text.

    Source: common practice (no published source); positions found by searching the text.
    """
    mark = read_yaml_text(PROTOCOL).marks[path]
    assert mark.key == _position(PROTOCOL, *key_at)
    assert mark.value == _position(PROTOCOL, *value_at)


def test_every_entry_has_a_mark():
    """Every key path and list index in the data, and the root, has a mark."""
    doc = read_yaml_text(PROTOCOL)

    def paths(node, prefix):
        yield prefix
        if isinstance(node, dict):
            for key, value in node.items():
                yield from paths(value, (*prefix, key))
        elif isinstance(node, list):
            for index, value in enumerate(node):
                yield from paths(value, (*prefix, index))

    expected = set(paths(doc.data, ()))
    assert set(doc.marks) == expected
    assert doc.marks[()].key == (2, 1)


def test_nearest_falls_back_to_the_closest_present_parent():
    """nearest() gives the longest prefix of a path that exists in the file."""
    doc = read_yaml_text(PROTOCOL)
    prefix, mark = doc.nearest(("timing", "stimulus_limit_s"))
    assert prefix == ("timing",)
    assert mark.key == _position(PROTOCOL, "timing:", "timing")
    assert doc.nearest(("nothing", "here"))[0] == ()


@pytest.mark.parametrize(
    ("text", "index", "expected"),
    [
        ("abc", 0, (1, 1)),
        ("abc", 2, (1, 3)),
        ("a\nbc", 3, (2, 2)),
        ("a\r\nb", 3, (2, 1)),
        ("a\rb\nc", 4, (3, 1)),
        ("a\u2028b", 2, (2, 1)),
    ],
)
def test_line_col_counts_lines_like_pyyaml(text, index, expected):
    """line_col agrees with the marks PyYAML's reader computes for the same offset.

    Source: PyYAML yaml.reader.Reader (its line-break handling) as the reference.
    """
    assert line_col(text, index) == expected
    reader = yaml.reader.Reader(text)
    reader.forward(index)
    mark = reader.get_mark()
    assert (mark.line + 1, mark.column + 1) == expected


def test_read_yaml_reads_a_file(tmp_path: Path):
    """read_yaml gives the same document as read_yaml_text and names the file."""
    path = tmp_path / "courier.yaml"
    path.write_text(PROTOCOL, encoding="utf-8")
    doc = read_yaml(path)
    assert doc.data == read_yaml_text(PROTOCOL).data
    assert doc.file == str(path)


def test_read_yaml_accepts_a_utf8_byte_order_mark(tmp_path: Path):
    """A UTF-8 byte order mark (as some Windows editors write) is ignored."""
    path = tmp_path / "bom.yaml"
    path.write_bytes(b"\xef\xbb\xbfstudy: courier\n")
    assert read_yaml(path).data == {"study": "courier"}


@pytest.mark.parametrize(
    ("raw", "line", "column"),
    [
        (b"study: caf\xe9\n", 1, 11),
        ("a: ñ\nb: ü".encode() + b"\xff\n", 2, 5),
        (b"\x80study: x\n", 1, 1),
    ],
)
def test_non_utf8_bytes_are_refused_at_the_first_bad_byte(tmp_path: Path, raw, line, column):
    """The first byte that is not UTF-8 is reported by line and character column.

    Source: Python's UTF-8 codec (UnicodeDecodeError.start) as the reference decoder.
    """
    path = tmp_path / "latin1.yaml"
    path.write_bytes(raw)
    with pytest.raises(ProtocolError) as caught:
        read_yaml(path)
    (problem,) = caught.value.problems
    assert (problem.line, problem.column, problem.code) == (line, column, "not-utf8")


def test_utf16_files_are_refused_with_advice(tmp_path: Path):
    """A file saved as UTF-16 is refused with the advice to save it as UTF-8."""
    path = tmp_path / "wide.yaml"
    path.write_bytes("study: courier\n".encode("utf-16"))
    with pytest.raises(ProtocolError, match="save it again as UTF-8") as caught:
        read_yaml(path)
    assert [p.code for p in caught.value.problems] == ["not-utf8"]


def test_files_over_the_size_limit_are_refused_without_parsing(tmp_path: Path):
    """A file larger than max_bytes is refused as a whole (line 0, column 0)."""
    path = tmp_path / "big.yaml"
    path.write_text("study: courier\n" + "# padding\n" * 20, encoding="utf-8")
    with pytest.raises(ProtocolError) as caught:
        read_yaml(path, max_bytes=100)
    (problem,) = caught.value.problems
    assert (problem.line, problem.column, problem.code) == (0, 0, "file-too-large")
    assert "100-byte limit" in problem.message  # the limit is named, so the user can compare
    assert read_yaml(path, max_bytes=1000).data == {"study": "courier"}


def test_text_over_the_size_limit_is_refused():
    """read_yaml_text applies the same limit to the UTF-8 size of the text."""
    with pytest.raises(ProtocolError, match="limit"):
        read_yaml_text("study: " + "é" * 60 + "\n", max_bytes=100)


def test_missing_file_and_folder_raise_input_file_errors(tmp_path: Path):
    """A missing path or a folder raises InputFileError naming the path."""
    with pytest.raises(InputFileError, match="does not exist"):
        read_yaml(tmp_path / "nope.yaml")
    with pytest.raises(InputFileError, match="is a folder"):
        read_yaml(tmp_path)
