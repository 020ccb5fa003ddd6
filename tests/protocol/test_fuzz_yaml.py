"""Property-based tests: the YAML reader either reads a document or refuses it cleanly."""

from __future__ import annotations

import math

import yaml
from hypothesis import HealthCheck, event, given, settings
from hypothesis import strategies as st

from runner.errors import ProtocolError
from runner.protocol.yamlsafe import YamlDoc, read_yaml, read_yaml_text

FILENAME = "fuzz.yaml"

VALID = """\
study: courier-hops
screen: {resolution: [1920, 1080], refresh_hz: 60, background: "#808080"}
answer:
  prompt: "How many stops lie on the shortest route?"
  max: 60
timing:
  fixation_ms: [700, 1300]
  gap_ms: 800
sequence:
  - page: {text: 'Welcome, dispatcher.'}
  - rest: {seconds: 60, label: baseline}
  - blocks:
      by: density
      order: balanced-latin
notes: |
  Depot maps are invented.
# end
"""

# Characters that matter to YAML, so mutations reach the scanner's and parser's error paths.
YAML_CHARS = ":-[]{},#&*!|>'\"%@`?~\t\n\r \\" + "ab1.\x00\x85\u2028\ufeff\xe9"


def _budget(examples: int) -> settings:
    """Hypothesis settings with no per-example deadline; the counts keep the file near 10 s."""
    return settings(
        max_examples=examples, deadline=None, suppress_health_check=[HealthCheck.too_slow]
    )


def _paths(node, prefix=()):
    yield prefix
    if isinstance(node, dict):
        for key, value in node.items():
            yield from _paths(value, (*prefix, key))
    elif isinstance(node, list):
        for index, value in enumerate(node):
            yield from _paths(value, (*prefix, index))


def _plain(node) -> bool:
    if isinstance(node, dict):
        return all(isinstance(k, str) and _plain(v) for k, v in node.items())
    if isinstance(node, list):
        return all(_plain(v) for v in node)
    return node is None or isinstance(node, str | int | float | bool)


def _check(read) -> None:
    """Call ``read()``: it must give a well-formed YamlDoc or a well-formed ProtocolError."""
    try:
        doc = read()
    except ProtocolError as exc:
        event("refused")
        assert exc.problems
        for problem in exc.problems:
            assert problem.severity == "error"
            assert problem.line >= 0 and problem.column >= 0
            assert isinstance(problem.message, str) and problem.message.strip()
            assert "\n" not in problem.message and "\r" not in problem.message
            assert problem.format().count("\n") == 0
        return
    event("read")
    assert isinstance(doc, YamlDoc)
    assert isinstance(doc.data, dict)
    assert _plain(doc.data)
    assert set(_paths(doc.data)) <= set(doc.marks)
    assert all(m.line >= 1 and m.column >= 1 for m in doc.marks.values())


@_budget(300)
@given(st.text(max_size=200) | st.text(max_size=100).map(lambda tail: "study: x\n" + tail))
def test_random_text_never_raises_anything_else(text):
    """Any text is either read or refused with well-formed problems, never another exception."""
    _check(lambda: read_yaml_text(text, filename=FILENAME))


@_budget(300)
@given(st.text(alphabet=YAML_CHARS, max_size=120))
def test_yaml_punctuation_soup_never_raises_anything_else(text):
    """Text made of YAML's special characters is read or refused cleanly."""
    _check(lambda: read_yaml_text(text, filename=FILENAME))


VALID_BYTES = VALID.encode("utf-8")
# Random bytes alone, or spliced into a good protocol so that more of them get past decoding.
_BYTES = st.binary(max_size=200) | st.tuples(
    st.integers(min_value=0, max_value=len(VALID_BYTES)), st.binary(min_size=1, max_size=8)
).map(lambda cut: VALID_BYTES[: cut[0]] + cut[1] + VALID_BYTES[cut[0] :])


@_budget(150)
@given(raw=_BYTES)
def test_random_bytes_never_raise_anything_else(tmp_path_factory, raw):
    """Any bytes in a file are read or refused cleanly, including bytes that are not UTF-8."""
    path = tmp_path_factory.mktemp("fuzz") / FILENAME
    path.write_bytes(raw)
    _check(lambda: read_yaml(path))


_EDITS = st.lists(
    st.tuples(
        st.sampled_from(["delete", "insert", "replace", "duplicate_line", "tab"]),
        st.integers(min_value=0, max_value=len(VALID)),
        st.sampled_from(YAML_CHARS),
    ),
    min_size=1,
    max_size=6,
)


def _mutate(text: str, edits) -> str:
    for kind, position, char in edits:
        position = min(position, len(text))
        if kind == "delete":
            text = text[:position] + text[position + 1 :]
        elif kind == "insert":
            text = text[:position] + char + text[position:]
        elif kind == "replace":
            text = text[:position] + char + text[position + 1 :]
        elif kind == "tab":
            start = text.rfind("\n", 0, position) + 1
            text = text[:start] + "\t" + text[start:]
        else:
            start = text.rfind("\n", 0, position) + 1
            end = text.find("\n", position)
            end = len(text) if end == -1 else end + 1
            text = text[:end] + text[start:end] + text[end:]
    return text


@_budget(400)
@given(_EDITS)
def test_mutated_protocols_are_read_or_refused_cleanly(edits):
    """Deleting, inserting and replacing characters, duplicating lines or adding tabs in a good
    protocol never makes the reader raise anything but a well-formed ProtocolError."""
    text = _mutate(VALID, edits)
    lines = len(text.splitlines()) + 1

    def read():
        return read_yaml_text(text, filename=FILENAME)

    _check(read)
    try:
        read()
    except ProtocolError as exc:
        # YAML also breaks lines at NEL, LS, PS and a lone CR, so allow one more line for each.
        breaks = sum(text.count(c) for c in "\r\x85\u2028\u2029")
        assert all(p.line <= lines + breaks for p in exc.problems)


_KEYS = st.from_regex(r"[a-z][a-z_]{0,8}", fullmatch=True)
_SCALARS = (
    st.none()
    | st.booleans()
    | st.integers(min_value=-(10**9), max_value=10**9)
    | st.floats(allow_nan=False, allow_infinity=True, width=64)
    | st.text(alphabet="abcdefgh XYZ", max_size=12)
)
_DATA = st.dictionaries(
    _KEYS,
    st.recursive(
        _SCALARS,
        lambda inner: st.lists(inner, max_size=4) | st.dictionaries(_KEYS, inner, max_size=4),
        max_leaves=12,
    ),
    min_size=1,
    max_size=5,
)


@_budget(200)
@given(data=_DATA, flow=st.booleans())
def test_pyyaml_dumps_read_back_to_the_same_data(data, flow):
    """Data written by PyYAML's safe_dump reads back unchanged, with a mark for every entry.

    Source: PyYAML yaml.safe_dump as the reference writer.
    """
    text = yaml.safe_dump(data, default_flow_style=flow, sort_keys=False)
    doc = read_yaml_text(text, filename=FILENAME)

    def same(a, b) -> bool:
        if isinstance(a, float) and isinstance(b, float):
            return a == b or (math.isinf(a) and a == b)
        if isinstance(a, dict) and isinstance(b, dict):
            return list(a) == list(b) and all(same(a[k], b[k]) for k in a)
        if isinstance(a, list) and isinstance(b, list):
            return len(a) == len(b) and all(same(x, y) for x, y in zip(a, b, strict=True))
        return type(a) is type(b) and a == b

    assert same(doc.data, data), text
    assert set(_paths(data)) == set(doc.marks)
    if not flow:
        lines = text.splitlines()
        for key in data:
            mark = doc.marks[(key,)]
            # PyYAML quotes keys that would read as other types ('no', 'null', '12').
            assert lines[mark.line - 1][mark.column - 1 :].lstrip("'\"").startswith(key)
