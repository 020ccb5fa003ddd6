"""Safe YAML reading for protocols, with a line and column for every key and value.

Protocols are small hand-written files, so this reader is strict where PyYAML is lenient and
plain where YAML 1.1 is surprising. It uses PyYAML's ``SafeLoader`` only to scan, parse and
compose the node graph; the plain Python values are then built here, so no YAML tag can ever
construct an arbitrary object.

Length: one module on purpose. The scanner hooks, the node walk and the YAML 1.2 scalar rules
share the mark bookkeeping; split apart they would need it passed through every call.

What the reader refuses (each as a :class:`~runner.errors.ProtocolError` whose problems point
at ``FILE:LINE:COL``):

- files larger than :data:`MAX_YAML_BYTES` (line 0, column 0: the file as a whole);
- bytes that are not UTF-8 (at the first bad byte), and control characters YAML does not allow;
- an empty file, or one holding only comments;
- YAML syntax errors (at the place the YAML scanner or parser stopped);
- tab characters where YAML allows only spaces (indentation, after ``:`` or ``-``);
- anchors (``&name``) and aliases (``*name``): protocols never need them, and refusing them
  while composing, before any value is built, also stops "billion laughs" alias bombs at once;
- nesting deeper than :data:`MAX_DEPTH` levels;
- a top level that is not a mapping;
- duplicate keys in one mapping (at the second, naming the line of the first);
- keys that are not text: empty keys, list or mapping keys, explicitly tagged keys, and the
  merge key ``<<``;
- YAML tags other than the basic ``!!str``, ``!!int``, ``!!float``, ``!!bool``, ``!!null``,
  ``!!map`` and ``!!seq`` (so ``!!binary``, ``!!set``, ``!!timestamp``, ``!!python/...`` and
  custom ``!tags`` are refused).

How plain (unquoted) scalars become values. YAML 1.1, which PyYAML follows, turns ``yes``,
``no``, ``on`` and ``off`` into booleans, ``012`` into 10 (octal), ``1:30`` into 90
(base 60) and ``2024-05-01`` into a date. None of that is what someone writing a protocol means,
so this reader follows the smaller YAML 1.2 core schema instead:

- ``null``, ``Null``, ``NULL``, ``~`` and an empty value are ``None``;
- ``true``/``false`` (also ``True``, ``TRUE``, ``False``, ``FALSE``) are booleans; ``yes``,
  ``no``, ``on`` and ``off`` stay text (the protocol model may still accept them for a
  true/false setting, as pydantic does);
- decimal integers (``012`` is twelve), ``0x`` hex and ``0o`` octal are ``int``; decimals
  and exponents (``1.5``, ``1e3``), ``.inf`` and ``.nan`` are ``float``;
- everything else is text, including dates and times (``2024-05-01``, ``12:30``), ``1_000``
  and ``0b101``.

Keys are always text, exactly as written: ``on:`` is the key ``"on"`` and ``1:`` the key
``"1"``, never a boolean or a number.
"""

from __future__ import annotations

import re
from dataclasses import dataclass, field
from pathlib import Path

import yaml
from yaml.nodes import MappingNode, Node, ScalarNode, SequenceNode

from runner.errors import InputFileError, Problem, ProtocolError

#: Largest protocol file read, in bytes. Real protocols are a few kilobytes; the limit keeps a
#: wrongly chosen file (a recording, an image) from being parsed at all.
MAX_YAML_BYTES = 1_000_000

#: Deepest nesting of mappings and lists accepted. Protocols nest four or five levels; the
#: limit keeps PyYAML's recursive composer far from Python's recursion limit.
MAX_DEPTH = 64

#: Longest echo of a user's text inside a message, in characters.
ECHO_CHARS = 60

Path_ = tuple[str | int, ...]

_TAG_PREFIX = "tag:yaml.org,2002:"
_STR_TAG = _TAG_PREFIX + "str"
_INT_TAG = _TAG_PREFIX + "int"
_FLOAT_TAG = _TAG_PREFIX + "float"
_BOOL_TAG = _TAG_PREFIX + "bool"
_NULL_TAG = _TAG_PREFIX + "null"
_MAP_TAG = _TAG_PREFIX + "map"
_SEQ_TAG = _TAG_PREFIX + "seq"
# Given by our resolver to every untagged plain scalar, so that plain text can be told apart
# from text the author tagged or quoted, and resolved by the rules in the module docstring.
_PLAIN_TAG = "tag:trialdeck:plain"

# YAML 1.2 core schema, tag resolution (section 10.3.2 of the YAML 1.2.2 specification).
_NULL_RE = re.compile(r"(?:~|null|Null|NULL|)")
_BOOL_TRUE_RE = re.compile(r"(?:true|True|TRUE)")
_BOOL_FALSE_RE = re.compile(r"(?:false|False|FALSE)")
_INT_DEC_RE = re.compile(r"[-+]?[0-9]+")
_INT_OCT_RE = re.compile(r"0o[0-7]+")
_INT_HEX_RE = re.compile(r"0x[0-9a-fA-F]+")
_FLOAT_RE = re.compile(r"[-+]?(?:\.[0-9]+|[0-9]+(?:\.[0-9]*)?)(?:[eE][-+]?[0-9]+)?")
_INF_RE = re.compile(r"([-+]?)\.(?:inf|Inf|INF)")
_NAN_RE = re.compile(r"\.(?:nan|NaN|NAN)")

# Line breaks as PyYAML counts them, so our own positions agree with its marks.
_BREAK_RE = re.compile("\r\n|[\r\n\x85\u2028\u2029]")

_UTF8_BOM = b"\xef\xbb\xbf"
_UTF16_BOMS = (b"\xff\xfe", b"\xfe\xff")


@dataclass(frozen=True)
class Mark:
    """Where one entry of a YAML document sits, 1-based.

    ``line``/``column`` is where the entry starts: the key of a mapping entry, the item itself
    for a list item, the first node for the document root. ``value_line``/``value_column`` is
    where its value starts (the same as the start for list items and the root).
    """

    line: int
    column: int
    value_line: int
    value_column: int

    @property
    def key(self) -> tuple[int, int]:
        """(line, column) of the key (or of the item for list items)."""
        return (self.line, self.column)

    @property
    def value(self) -> tuple[int, int]:
        """(line, column) of the value."""
        return (self.value_line, self.value_column)


@dataclass
class YamlDoc:
    """A protocol file read into plain Python values, with a :class:`Mark` for every entry.

    ``data`` holds only dict, list, str, int, float, bool and None. ``marks`` maps each path
    (a tuple of keys and list indices, ``("sequence", 2, "blocks", "by")``; ``()`` is the
    root) to its :class:`Mark`.
    """

    file: str
    data: dict[str, object]
    marks: dict[Path_, Mark] = field(default_factory=dict)

    def nearest(self, path: Path_) -> tuple[Path_, Mark]:
        """Return the longest prefix of ``path`` that exists in the document, and its mark.

        Parameters
        ----------
        path : tuple of str or int
            Key path, possibly naming a key that is missing from the file.

        Returns
        -------
        tuple
            ``(prefix, mark)``; ``prefix`` is ``()`` (the root) when nothing else matches.
        """
        for end in range(len(path), -1, -1):
            prefix = tuple(path[:end])
            mark = self.marks.get(prefix)
            if mark is not None:
                return prefix, mark
        # The root is always marked by read_yaml_text; this keeps hand-built docs usable.
        return (), Mark(1, 1, 1, 1)


def read_yaml(path: Path, *, max_bytes: int = MAX_YAML_BYTES) -> YamlDoc:
    """Read a protocol YAML file safely, keeping the line and column of every entry.

    Parameters
    ----------
    path : Path
        The YAML file.
    max_bytes : int, optional
        Refuse files larger than this many bytes (default :data:`MAX_YAML_BYTES`).

    Returns
    -------
    YamlDoc
        The plain data and the marks.

    Raises
    ------
    InputFileError
        The file is missing or cannot be read.
    ProtocolError
        The file is too large, not UTF-8, or not an acceptable YAML mapping (see the module
        docstring for the full list).
    """
    path = Path(path)
    name = str(path)
    try:
        info = path.stat()
        kind = _special_kind(info.st_mode)
        if kind:
            inside = " inside it" if kind == "a folder" else ""
            raise InputFileError(
                f"{name!r} is {kind}, not a protocol file; name the .yaml file{inside}."
            )
        size = info.st_size
        if size > max_bytes:
            raise ProtocolError([_too_big(name, size, max_bytes)])
        with path.open("rb") as handle:
            raw = handle.read(max_bytes + 1)
    except FileNotFoundError:
        raise InputFileError(
            f"The protocol file {name!r} does not exist; check the path and the spelling."
        ) from None
    except IsADirectoryError:
        raise InputFileError(
            f"{name!r} is a folder, not a protocol file; name the .yaml file inside it."
        ) from None
    except OSError as exc:
        raise InputFileError(
            f"The protocol file {name!r} cannot be read: {exc.strerror}."
        ) from None
    if len(raw) > max_bytes:
        raise ProtocolError([_too_big(name, len(raw), max_bytes)])
    return read_yaml_text(_decode(raw, name), filename=name, max_bytes=max_bytes)


def _special_kind(mode: int) -> str:
    """What a path that is not a regular file is ('a folder', 'a named pipe (FIFO)', ...)."""
    import stat

    if stat.S_ISREG(mode):
        return ""
    if stat.S_ISDIR(mode):
        return "a folder"
    if stat.S_ISFIFO(mode):
        return "a named pipe (FIFO)"
    if stat.S_ISCHR(mode) or stat.S_ISBLK(mode):
        return "a device"
    if stat.S_ISSOCK(mode):
        return "a socket"
    return "not a regular file"


def read_yaml_text(
    text: str, *, filename: str = "<protocol>", max_bytes: int = MAX_YAML_BYTES
) -> YamlDoc:
    """Read protocol YAML from a string (for tests, fuzzing and in-memory protocols).

    Parameters
    ----------
    text : str
        The YAML text.
    filename : str, optional
        Name used in problem lines.
    max_bytes : int, optional
        Refuse texts whose UTF-8 form is larger than this many bytes.

    Returns
    -------
    YamlDoc
        The plain data and the marks.

    Raises
    ------
    ProtocolError
        The text is not an acceptable YAML mapping (see the module docstring).
    """
    size = len(text.encode("utf-8", errors="surrogatepass"))
    if size > max_bytes:
        raise ProtocolError([_too_big(filename, size, max_bytes)])
    loader: _ProtocolLoader | None = None
    try:
        # PyYAML checks for disallowed characters already while the loader is made.
        loader = _ProtocolLoader(text, filename)
        root = loader.get_single_node()
    except yaml.MarkedYAMLError as exc:
        raise ProtocolError([_syntax_problem(exc, text, filename)]) from None
    except yaml.reader.ReaderError as exc:
        raise ProtocolError([_reader_problem(exc, text, filename)]) from None
    except yaml.YAMLError as exc:
        message = _one_line(f"The file is not valid YAML: {exc}.")
        raise ProtocolError(
            [Problem("error", filename, 0, 0, message, code="yaml-syntax")]
        ) from None
    finally:
        if loader is not None:
            loader.dispose()

    if root is None:
        raise ProtocolError(
            [
                Problem(
                    "error",
                    filename,
                    0,
                    0,
                    "The file is empty or holds only comments; a protocol needs settings "
                    "written as 'key: value' lines, starting with 'study: <name>'.",
                    code="empty-file",
                )
            ]
        )
    builder = _Builder(filename)
    data = builder.build(root, ())
    start = _node_start(root)
    builder.marks[()] = Mark(*start, *start)
    if not builder.problems and not isinstance(data, dict):
        builder.problems.append(_not_a_mapping(filename, root, data))
    if builder.problems:
        raise ProtocolError(builder.problems)
    assert isinstance(data, dict)  # guaranteed by the check just above
    return YamlDoc(file=filename, data=data, marks=builder.marks)


def line_col(text: str, index: int) -> tuple[int, int]:
    """Return the 1-based (line, column) of character ``index`` in ``text``.

    Lines break where PyYAML breaks them (``\\r\\n``, ``\\r``, ``\\n``, NEL, LS, PS), so the
    result agrees with the marks of YAML errors.

    Parameters
    ----------
    text : str
        The whole text.
    index : int
        Character offset, 0-based.

    Returns
    -------
    tuple of int
        (line, column), both starting at 1.
    """
    line = 1
    line_start = 0
    for match in _BREAK_RE.finditer(text, 0, index):
        if match.end() > index:
            break
        line += 1
        line_start = match.end()
    return line, index - line_start + 1


# --------------------------------------------------------------------------------------------
# Loader: PyYAML scanning, parsing and composing, with aliases, anchors and depth refused.


class _ProtocolLoader(yaml.SafeLoader):
    """SafeLoader that composes nodes only; values are built by :class:`_Builder`."""

    def __init__(self, text: str, filename: str) -> None:
        super().__init__(text)
        self._filename = filename
        self._depth = 0

    def resolve(self, kind: type, value: object, implicit: object) -> str:
        # Untagged plain scalars get our own tag; the builder applies the YAML 1.2 core rules
        # to them. Quoted and explicitly tagged scalars keep PyYAML's resolution.
        if kind is ScalarNode and isinstance(implicit, tuple) and implicit[0]:
            return _PLAIN_TAG
        return super().resolve(kind, value, implicit)

    def compose_node(self, parent: Node | None, index: object) -> Node:
        event = self.peek_event()
        if isinstance(event, yaml.AliasEvent):
            raise ProtocolError(
                [
                    _problem_at_mark(
                        self._filename,
                        event.start_mark,
                        f"Aliases such as '*{_echo_raw(event.anchor)}' are not allowed in a "
                        "protocol; write the value out in full.",
                        code="yaml-alias",
                    )
                ]
            )
        anchor = getattr(event, "anchor", None)
        if anchor is not None:
            raise ProtocolError(
                [
                    _problem_at_mark(
                        self._filename,
                        event.start_mark,
                        f"Anchors such as '&{_echo_raw(anchor)}' are not allowed in a protocol; "
                        "remove the anchor and write every value out in full.",
                        code="yaml-anchor",
                    )
                ]
            )
        if self._depth >= MAX_DEPTH:
            raise ProtocolError(
                [
                    _problem_at_mark(
                        self._filename,
                        event.start_mark,
                        f"The settings are nested more than {MAX_DEPTH} levels deep here; "
                        "a protocol never needs that, so check the brackets and indentation.",
                        code="too-deep",
                    )
                ]
            )
        self._depth += 1
        try:
            return super().compose_node(parent, index)
        finally:
            self._depth -= 1


# --------------------------------------------------------------------------------------------
# Builder: node graph to plain values and marks, collecting every problem it finds.


class _Builder:
    def __init__(self, filename: str) -> None:
        self.filename = filename
        self.marks: dict[Path_, Mark] = {}
        self.problems: list[Problem] = []

    def _add(self, node: Node, message: str, *, code: str) -> None:
        line, col = _node_start(node)
        self.problems.append(Problem("error", self.filename, line, col, message, code=code))

    def build(self, node: Node, path: Path_) -> object:
        if isinstance(node, MappingNode):
            if node.tag != _MAP_TAG:
                self._add(node, _unsupported_tag(node.tag), code="yaml-tag")
                return None
            return self._mapping(node, path)
        if isinstance(node, SequenceNode):
            if node.tag != _SEQ_TAG:
                self._add(node, _unsupported_tag(node.tag), code="yaml-tag")
                return None
            items: list[object] = []
            for index, item in enumerate(node.value):
                start = _node_start(item)
                self.marks[(*path, index)] = Mark(*start, *start)
                items.append(self.build(item, (*path, index)))
            return items
        assert isinstance(node, ScalarNode)  # PyYAML composes only these three node kinds
        return self._scalar(node)

    def _mapping(self, node: MappingNode, path: Path_) -> dict[str, object]:
        result: dict[str, object] = {}
        first_line: dict[str, int] = {}
        for key_node, value_node in node.value:
            key = self._key(key_node)
            if key is None:
                continue
            key_line, key_col = _node_start(key_node)
            if key in first_line:
                self._add(
                    key_node,
                    f"The key {_echo(key)} appears twice in the same mapping (first on line "
                    f"{first_line[key]}); keep only one of them.",
                    code="duplicate-key",
                )
                continue
            first_line[key] = key_line
            self.marks[(*path, key)] = Mark(key_line, key_col, *_node_start(value_node))
            result[key] = self.build(value_node, (*path, key))
        return result

    def _key(self, node: Node) -> str | None:
        if not isinstance(node, ScalarNode):
            kind = "list" if isinstance(node, SequenceNode) else "mapping"
            self._add(
                node,
                f"A key must be a plain name, not a {kind}; write 'name: value'.",
                code="bad-key",
            )
            return None
        if node.tag not in (_PLAIN_TAG, _STR_TAG):
            self._add(
                node,
                f"The key {_echo(node.value)} carries the YAML tag {_tag_name(node.tag)!r}; keys "
                "are always names, so remove the tag.",
                code="yaml-tag",
            )
            return None
        if node.tag == _PLAIN_TAG and node.value == "<<":
            self._add(
                node,
                "Merge keys ('<<') are not allowed in a protocol; write the settings out in full.",
                code="yaml-merge-key",
            )
            return None
        if node.value == "":
            self._add(node, "A key is empty; write a name before ':'.", code="bad-key")
            return None
        return str(node.value)

    def _scalar(self, node: ScalarNode) -> object:
        try:
            return self._scalar_value(node)
        except ValueError:  # a whole number longer than Python converts (4300 digits)
            text = str(node.value)
            self._add(
                node,
                f"The number {text[:12]}... has {len(text)} digits; no setting takes a number "
                "that long.",
                code="out-of-range",
            )
            return None

    def _scalar_value(self, node: ScalarNode) -> object:
        text = str(node.value)
        tag = node.tag
        if tag == _STR_TAG:
            return text
        if tag == _PLAIN_TAG:
            return _plain_value(text)
        wanted = {
            _INT_TAG: (_int_value, "a whole number"),
            _FLOAT_TAG: (_float_value, "a number"),
            _BOOL_TAG: (_bool_value, "true or false"),
            _NULL_TAG: (_null_value, "empty (null)"),
        }.get(tag)
        if wanted is None:
            self._add(node, _unsupported_tag(tag), code="yaml-tag")
            return None
        convert, what = wanted
        value = convert(text)
        if value is _NOT_THIS_TYPE:
            self._add(
                node,
                f"The value {_echo(text)} is tagged {_tag_name(tag)!r} but is not {what}; "
                "fix the value or remove the tag.",
                code="yaml-tag",
            )
            return None
        return value


_NOT_THIS_TYPE = object()


def _null_value(text: str) -> object:
    return None if _NULL_RE.fullmatch(text) else _NOT_THIS_TYPE


def _bool_value(text: str) -> object:
    if _BOOL_TRUE_RE.fullmatch(text):
        return True
    if _BOOL_FALSE_RE.fullmatch(text):
        return False
    return _NOT_THIS_TYPE


def _int_value(text: str) -> object:
    if _INT_DEC_RE.fullmatch(text):
        return int(text, 10)
    if _INT_OCT_RE.fullmatch(text):
        return int(text[2:], 8)
    if _INT_HEX_RE.fullmatch(text):
        return int(text[2:], 16)
    return _NOT_THIS_TYPE


def _float_value(text: str) -> object:
    if _FLOAT_RE.fullmatch(text):
        return float(text)
    inf = _INF_RE.fullmatch(text)
    if inf:
        return float(f"{inf.group(1)}inf")
    if _NAN_RE.fullmatch(text):
        return float("nan")
    return _NOT_THIS_TYPE


def _plain_value(text: str) -> object:
    for convert in (_null_value, _bool_value, _int_value, _float_value):
        value = convert(text)
        if value is not _NOT_THIS_TYPE:
            return value
    return text


# --------------------------------------------------------------------------------------------
# Problems.


def _one_line(message: str) -> str:
    return " ".join(message.split())


def _echo_raw(text: str) -> str:
    shown = repr(text)[1:-1]
    return shown if len(shown) <= ECHO_CHARS else shown[: ECHO_CHARS - 3] + "..."


def _echo(text: str) -> str:
    """Quote user text for a message: repr() escapes newlines and control characters."""
    shown = repr(text)
    return shown if len(shown) <= ECHO_CHARS else shown[: ECHO_CHARS - 4] + "...'"


def _tag_name(tag: str) -> str:
    return "!!" + tag[len(_TAG_PREFIX) :] if tag.startswith(_TAG_PREFIX) else tag


def _unsupported_tag(tag: str) -> str:
    return (
        f"The YAML tag {_echo(_tag_name(tag))} is not allowed in a protocol; only plain values, "
        "lists and mappings are, so remove the tag."
    )


def _node_start(node: Node) -> tuple[int, int]:
    return node.start_mark.line + 1, node.start_mark.column + 1


def _problem_at_mark(filename: str, mark: yaml.Mark | None, message: str, *, code: str) -> Problem:
    if mark is None:
        return Problem("error", filename, 0, 0, _one_line(message), code=code)
    line, col = mark.line + 1, mark.column + 1
    return Problem("error", filename, line, col, _one_line(message), code=code)


def _too_big(filename: str, size: int, limit: int) -> Problem:
    return Problem(
        "error",
        filename,
        0,
        0,
        f"The file is {size} bytes, more than the {limit}-byte limit for a protocol; check "
        "that this is the protocol file and not a data or image file.",
        code="file-too-large",
    )


def _not_a_mapping(filename: str, root: Node, data: object) -> Problem:
    line, col = _node_start(root)
    if data is None:
        message = (
            "The file holds no settings; a protocol is a list of 'key: value' lines, starting "
            "with 'study: <name>'."
        )
    elif isinstance(data, list):
        message = (
            "The top level of a protocol must be 'key: value' settings, but this file starts "
            "with a list ('- ...'); remove the leading dashes."
        )
    else:
        message = (
            f"The top level of a protocol must be 'key: value' settings, but this file holds "
            f"the single value {_echo(str(data))}."
        )
    return Problem("error", filename, line, col, message, code="not-a-mapping")


def _char_at(text: str, mark: yaml.Mark) -> str:
    index = mark.index
    return text[index] if 0 <= index < len(text) else ""


def _syntax_problem(exc: yaml.MarkedYAMLError, text: str, filename: str) -> Problem:
    mark = exc.problem_mark or exc.context_mark
    if mark is not None and _char_at(text, mark) == "\t":
        line_start = text.rfind("\n", 0, mark.index) + 1
        before = text[line_start : mark.index]
        if before.strip(" \t") == "":
            where = "for indentation"
        else:
            where = "here (after ':', '-', ',' or a value)"
        return _problem_at_mark(
            filename,
            mark,
            f"A tab character is used {where}, where YAML allows only spaces; replace the tab "
            "with spaces.",
            code="yaml-tab",
        )
    problem = exc.problem or "the text cannot be read"
    ctx = exc.context_mark
    opened = _OPENERS.get(exc.context or "")
    if ctx is not None and mark is not None and opened is not None:
        # An unclosed bracket or quote: the parser gives up where it first notices (often lines
        # later); the mistake is where the bracket or quote opened, so point there.
        what, closer = opened
        return _problem_at_mark(
            filename,
            ctx,
            f"YAML syntax error: the {what} opened here is not closed (at line {mark.line + 1},"
            f" column {mark.column + 1} the parser found: {problem}); close it with {closer}"
            " before that point.",
            code="yaml-syntax",
        )
    where = ""
    if ctx is not None and ctx is not mark:
        where = f" (which starts at line {ctx.line + 1}, column {ctx.column + 1})"
    if exc.context and exc.context.startswith("while"):
        message = f"YAML syntax error {exc.context}{where}: {problem}"
    elif exc.context:
        message = f"YAML syntax error: {exc.context}{where}, {problem}"
    else:
        message = f"YAML syntax error: {problem}"
    hint = _SYNTAX_HINTS.get(problem)
    message += f"; {hint}" if hint else "; check the quotes, brackets and indentation here."
    return _problem_at_mark(filename, mark, message, code="yaml-syntax")


# PyYAML's context for a bracket or quote that is not closed: what was opened, what closes it.
_OPENERS = {
    "while parsing a flow sequence": ("list bracket '['", "']'"),
    "while parsing a flow mapping": ("brace '{'", "'}'"),
    "while scanning a quoted scalar": ("quote", "the same quote character"),
}

# Plainer advice for the errors people make most; the keys are PyYAML's own problem texts.
_SYNTAX_HINTS = {
    "mapping values are not allowed here": (
        "a value that contains ': ' must be put in quotes, and each setting needs its own line."
    ),
    "but found another document": (
        "a protocol is one document, so remove the extra '---' line or split the file."
    ),
    "found unexpected end of stream": "a quote or bracket opened earlier is never closed.",
}


def _reader_problem(exc: yaml.reader.ReaderError, text: str, filename: str) -> Problem:
    line, col = line_col(text, exc.position)
    code = exc.character if isinstance(exc.character, int) else 0
    return Problem(
        "error",
        filename,
        line,
        col,
        f"The file contains the character U+{code:04X}, which YAML does not allow; "
        "delete it (such invisible characters often come from copying text out of another program).",
        code="bad-character",
    )


def _decode(raw: bytes, filename: str) -> str:
    if raw.startswith(_UTF16_BOMS):
        raise ProtocolError(
            [
                Problem(
                    "error",
                    filename,
                    1,
                    1,
                    "The file is saved as UTF-16; save it again as UTF-8 (plain text).",
                    code="not-utf8",
                )
            ]
        )
    body = raw[len(_UTF8_BOM) :] if raw.startswith(_UTF8_BOM) else raw
    try:
        return body.decode("utf-8")
    except UnicodeDecodeError as exc:
        before = body[: exc.start].decode("utf-8")
        line, col = line_col(before, len(before))
        bad = body[exc.start : exc.start + 1].hex().upper()
        raise ProtocolError(
            [
                Problem(
                    "error",
                    filename,
                    line,
                    col,
                    f"The byte 0x{bad} here is not UTF-8 text; save the file as UTF-8 "
                    "(some editors call it 'Unicode (UTF-8)') and retype any special "
                    "characters.",
                    code="not-utf8",
                )
            ]
        ) from None
