"""Turn pydantic validation errors into :class:`~runner.errors.Problem` lines with positions.

Every problem names the setting by its path (``timing.fixation_ms``, ``sequence[2].blocks.by``),
points at the line and column of that setting in the YAML file, echoes the bad value with
``repr`` and says what is allowed. The functions work with any pydantic v2 model; they need the
:class:`~runner.protocol.yamlsafe.YamlDoc` the data came from, for the positions.

Length: one module on purpose: it is a table of pydantic error kinds with one phrasing rule each,
and the rules share the path and value formatting.

Conventions the model can use to get better messages:

- a field's ``description`` is used as the "expected" phrase when the value has the wrong type
  or shape, so write it as a noun phrase: ``Field(description="two numbers [low, high] in
  milliseconds")`` gives ``timing.fixation_ms: expected two numbers [low, high] in
  milliseconds, got 'abc'``;
- bounds given with ``Field(ge=..., le=...)`` are all quoted when one of them is broken.

Unions. pydantic puts the name of each union member (or the tag of a discriminated union) into
the error location. Those names are removed here by matching the location against the data, so
``('sequence', 2, 'PageStep', 'page', 'text')`` becomes ``sequence[2].page.text``. For a plain
(not discriminated) union of models, pydantic reports the errors of every member; only the
members whose top-level keys fit the data are kept, and when none fits, the unknown keys are
reported with a suggestion drawn from the keys of all members.
"""

from __future__ import annotations

import difflib
import re
import types
import typing
from collections import defaultdict
from collections.abc import Callable, Mapping, Sequence
from dataclasses import dataclass, field
from inspect import isclass
from typing import Any

import pydantic
from pydantic import BaseModel
from pydantic.fields import FieldInfo

from runner.errors import Problem
from runner.protocol.yamlsafe import YamlDoc

Path_ = tuple[str | int, ...]
KnownKeys = Callable[[Path_], Sequence[str]]

#: Longest echo of a bad value inside a message, in characters.
ECHO_CHARS = 60
#: Most allowed keys listed after an unknown key.
MAX_LISTED_KEYS = 12
#: difflib similarity needed before a key or value is suggested (difflib's own default).
SUGGEST_CUTOFF = 0.6
#: Longest pydantic location searched exhaustively for union tags; longer ones are rare.
MAX_LOC_SEARCH = 24

# "Expected ..." phrases for pydantic's type and parsing errors (pydantic error type names).
_EXPECTED = {
    "int_type": "a whole number",
    "int_parsing": "a whole number",
    "int_from_float": "a whole number",
    "float_type": "a number",
    "float_parsing": "a number",
    "finite_number": "a finite number",
    "decimal_type": "a number",
    "decimal_parsing": "a number",
    "bool_type": "true or false",
    "bool_parsing": "true or false",
    "string_type": "text",
    "string_unicode": "text",
    "bytes_type": "text",
    "list_type": "a list",
    "tuple_type": "a list",
    "set_type": "a list",
    "frozen_set_type": "a list",
    "iterable_type": "a list",
    "dict_type": "a mapping of 'key: value' settings",
    "model_type": "a mapping of 'key: value' settings",
    "model_attributes_type": "a mapping of 'key: value' settings",
    "dataclass_type": "a mapping of 'key: value' settings",
    "none_required": "nothing (leave the value empty)",
    "date_type": "a date such as 2024-05-01",
    "date_parsing": "a date such as 2024-05-01",
    "date_from_datetime_parsing": "a date such as 2024-05-01",
    "datetime_type": "a date and time such as 2024-05-01T09:30:00",
    "datetime_parsing": "a date and time such as 2024-05-01T09:30:00",
    "datetime_from_date_parsing": "a date and time such as 2024-05-01T09:30:00",
    "time_type": "a time such as 09:30:00",
    "time_parsing": "a time such as 09:30:00",
}
# Errors about the shape of the whole value, where a field's description is the best phrase.
_SHAPE_ERRORS = frozenset(_EXPECTED) | {"too_short", "too_long"}
_PREFIXES = ("Value error, ", "Assertion failed, ")
# Problem codes (runner.errors.PROBLEM_CODES) of pydantic error types; others are "bad-value".
_CODES = {
    **dict.fromkeys(_EXPECTED, "bad-type"),
    "missing": "missing-field",
    "missing_one_of": "missing-field",
    "extra_forbidden": "unknown-field",
    "union_tag_invalid": "unknown-kind",
    "literal_error": "bad-choice",
    "enum": "bad-choice",
    "greater_than": "out-of-range",
    "greater_than_equal": "out-of-range",
    "less_than": "out-of-range",
    "less_than_equal": "out-of-range",
    "multiple_of": "out-of-range",
    "too_short": "bad-length",
    "too_long": "bad-length",
    "string_too_short": "bad-length",
    "string_too_long": "bad-length",
    "string_pattern_mismatch": "bad-pattern",
    # Custom error types raised by runner.protocol.model's validators.
    "unknown_key": "unknown-key",
    "key_clash": "key-clash",
    "control_character": "control-character",
}
_QUOTED_RE = re.compile(r"'((?:[^'\\]|\\.)*)'")
_IDENT_RE = re.compile(r"[A-Za-z_][A-Za-z0-9_-]*")
_PATH_TOKEN_RE = re.compile(r"\[(\d+)\]|\['((?:[^'\\]|\\.)*)'\]|\.?([^.\[\]]+)")


# --------------------------------------------------------------------------------------------
# Paths.


def format_path(path: Sequence[str | int]) -> str:
    """Write a key path in dotted form with list indices: ``sequence[2].blocks.by``.

    Parameters
    ----------
    path : sequence of str or int
        Keys (str) and list indices (int).

    Returns
    -------
    str
        The dotted form; ``""`` for the root. Keys that are not plain names are quoted,
        ``labels['very hard']``.
    """
    out = ""
    for element in path:
        if isinstance(element, int):
            out += f"[{element}]"
        elif _IDENT_RE.fullmatch(element):
            out += f".{element}" if out else element
        else:
            out += f"[{element!r}]"
    return out


def parse_path(text: str) -> Path_:
    """Read a path written by :func:`format_path` back into a tuple.

    Parameters
    ----------
    text : str
        Dotted path such as ``sequence[2].blocks.by``.

    Returns
    -------
    tuple of str or int
        ``("sequence", 2, "blocks", "by")``.
    """
    path: list[str | int] = []
    for index, quoted, name in _PATH_TOKEN_RE.findall(text):
        if index:
            path.append(int(index))
        elif quoted:
            path.append(quoted.encode("utf-8").decode("unicode_escape"))
        elif name:
            path.append(name)
    return tuple(path)


# --------------------------------------------------------------------------------------------
# The model, walked along a path.


def _members(annotation: Any) -> list[Any]:
    """Flatten Annotated, Optional and unions into the plain types they allow."""
    origin = typing.get_origin(annotation)
    if origin is typing.Annotated:
        return _members(typing.get_args(annotation)[0])
    if origin is typing.Union or origin is types.UnionType:
        return [m for arg in typing.get_args(annotation) for m in _members(arg)]
    return [annotation]


def _is_model(tp: Any) -> bool:
    return isclass(tp) and issubclass(tp, BaseModel)


def _field_names(model: type[BaseModel]) -> list[str]:
    return [info.alias or name for name, info in model.model_fields.items()]


def _step(annotation: Any, element: str | int) -> list[tuple[Any, FieldInfo | None]]:
    """The annotations reachable from ``annotation`` by one path element."""
    found: list[tuple[Any, FieldInfo | None]] = []
    for tp in _members(annotation):
        origin = typing.get_origin(tp)
        args = typing.get_args(tp)
        if _is_model(tp) and isinstance(element, str):
            for name, info in tp.model_fields.items():
                if element in (name, info.alias):
                    found.append((info.annotation, info))
        elif isinstance(element, int) and origin in (list, set, frozenset, Sequence):
            found.extend((arg, None) for arg in args[:1])
        elif isinstance(element, int) and origin is tuple and args:
            if len(args) == 2 and args[1] is Ellipsis:
                found.append((args[0], None))
            elif element < len(args):
                found.append((args[element], None))
        elif isinstance(element, str) and origin in (dict, Mapping) and len(args) == 2:
            found.append((args[1], None))
    return found


def _walk(model: type[BaseModel], path: Path_) -> list[tuple[Any, FieldInfo | None]]:
    current: list[tuple[Any, FieldInfo | None]] = [(model, None)]
    for element in path:
        current = [hit for annotation, _ in current for hit in _step(annotation, element)]
        if not current:
            break
    return current


def known_keys_from_model(model: type[BaseModel]) -> KnownKeys:
    """Make a ``known_keys`` function from a pydantic model class.

    Parameters
    ----------
    model : type of BaseModel
        The top-level model.

    Returns
    -------
    callable
        ``known_keys(path)`` gives the keys allowed in the mapping at ``path`` (a tuple of keys
        and list indices, union tags removed). For a union of models it gives the keys of all
        members, so ``sequence[2]`` lists every kind of step.
    """

    def known_keys(path: Path_) -> list[str]:
        names: list[str] = []
        for annotation, _ in _walk(model, tuple(path)):
            for tp in _members(annotation):
                if _is_model(tp):
                    names.extend(n for n in _field_names(tp) if n not in names)
        return names

    return known_keys


def _field_at(model: type[BaseModel] | None, path: Path_) -> FieldInfo | None:
    if model is None or not path:
        return None
    infos = [info for _, info in _walk(model, path) if info is not None]
    return infos[0] if len(infos) == 1 else None


def _bounds(info: FieldInfo | None) -> str:
    if info is None:
        return ""
    low = high = ""
    for item in info.metadata:
        if getattr(item, "ge", None) is not None:
            low = f"at least {item.ge}"
        if getattr(item, "gt", None) is not None:
            low = f"more than {item.gt}"
        if getattr(item, "le", None) is not None:
            high = f"at most {item.le}"
        if getattr(item, "lt", None) is not None:
            high = f"less than {item.lt}"
    return " and ".join(part for part in (low, high) if part)


# --------------------------------------------------------------------------------------------
# Matching pydantic locations against the data, to drop union tags.


def _has(node: object, element: str | int) -> bool:
    if isinstance(node, dict):
        return isinstance(element, str) and element in node
    if isinstance(node, list):
        return (
            isinstance(element, int) and not isinstance(element, bool) and 0 <= element < len(node)
        )
    return False


def _child(node: object, element: str | int) -> object:
    return node[element]  # type: ignore[index]  # _has() checked the element first


@dataclass(frozen=True)
class _Skip:
    prefix: Path_  # kept path before the dropped element
    member: str  # the dropped element (a union member name or tag)


def _match(data: object, loc: Sequence[str | int]) -> tuple[Path_, tuple[_Skip, ...]]:
    """Keep the location elements that exist in the data, dropping as few as possible."""
    loc = tuple(loc)
    if len(loc) > MAX_LOC_SEARCH:
        return _match_greedy(data, loc)
    # Keyed by the kept path too: equal scalars may be one shared object in several places.
    memo: dict[tuple[int, int, Path_], tuple[int, Path_, tuple[_Skip, ...]]] = {}

    def best(node: object, i: int, kept: Path_) -> tuple[int, Path_, tuple[_Skip, ...]]:
        if i == len(loc):
            return 0, (), ()
        key = (id(node), i, kept)
        if key in memo:
            return memo[key]
        element = loc[i]
        options = []
        if _has(node, element):
            score, rest, skips = best(_child(node, element), i + 1, (*kept, element))
            options.append((score + 1, (element, *rest), skips))
        score, rest, skips = best(node, i + 1, kept)
        options.append((score, rest, (_Skip(kept, str(element)), *skips)))
        # max() keeps the first of equal scores: keeping an element beats dropping it.
        result = max(options, key=lambda option: option[0])
        memo[key] = result
        return result

    _, path, skips = best(data, 0, ())
    return path, skips


def _match_greedy(data: object, loc: Path_) -> tuple[Path_, tuple[_Skip, ...]]:
    kept: Path_
    skips: tuple[_Skip, ...]
    node, kept, skips = data, (), ()
    for element in loc:
        if _has(node, element):
            node, kept = _child(node, element), (*kept, element)
        else:
            skips = (*skips, _Skip(kept, str(element)))
    return kept, skips


# --------------------------------------------------------------------------------------------
# Errors to problems.


@dataclass
class _Entry:
    error: dict[str, Any]
    path: Path_
    skips: tuple[_Skip, ...]
    key_error: bool = False
    alternatives: list[str] = field(default_factory=list)

    @property
    def type(self) -> str:
        return str(self.error["type"])


def _entry(error: dict[str, Any], data: object) -> _Entry:
    loc = tuple(error["loc"])
    key_error = bool(loc) and loc[-1] == "[key]"
    if key_error:
        loc = loc[:-1]
    if error["type"] == "missing" and loc:
        parent, skips = _match(data, loc[:-1])
        return _Entry(error, (*parent, loc[-1]), skips)
    path, skips = _match(data, loc)
    return _Entry(error, path, skips, key_error=key_error)


def _fits(entries: list[_Entry], prefix: Path_) -> bool:
    """A union member fits when the data has its keys: no missing or unknown key at its top."""
    return not any(
        e.type in ("missing", "extra_forbidden") and len(e.path) == len(prefix) + 1 for e in entries
    )


def _prune(entries: list[_Entry], level: int) -> list[_Entry]:
    out = [e for e in entries if len(e.skips) <= level]
    groups: dict[Path_, list[_Entry]] = defaultdict(list)
    for e in entries:
        if len(e.skips) > level:
            groups[e.skips[level].prefix].append(e)
    for prefix, group in groups.items():
        by_member: dict[str, list[_Entry]] = defaultdict(list)
        for e in group:
            by_member[e.skips[level].member].append(e)
        if len(by_member) == 1:
            out.extend(_prune(group, level + 1))
            continue
        fitting = [m for m, members in by_member.items() if _fits(members, prefix)]
        chosen = [e for m in fitting for e in by_member[m]]
        if len(fitting) > 1 and all(e.path == prefix and e.type in _EXPECTED for e in chosen):
            # A union of plain types (int | str): one problem listing each expected type.
            first = chosen[0]
            first.alternatives = list(dict.fromkeys(_EXPECTED[e.type] for e in chosen))
            out.append(first)
        elif fitting:
            out.extend(_prune(chosen, level + 1))
        else:
            out.extend(_no_member_fits(group, prefix))
    return out


def _no_member_fits(group: list[_Entry], prefix: Path_) -> list[_Entry]:
    """No union member has its keys: report the unknown keys, or the keys that could be used."""
    missing = list(
        dict.fromkeys(
            str(e.path[-1]) for e in group if e.type == "missing" and len(e.path) == len(prefix) + 1
        )
    )
    extras: dict[Path_, _Entry] = {}
    for e in group:
        if e.type == "extra_forbidden" and len(e.path) == len(prefix) + 1:
            extras.setdefault(e.path, e)
    for e in extras.values():
        e.alternatives = missing
    if extras:
        return list(extras.values())
    first = group[0]
    if missing:
        first.error = {**first.error, "type": "missing_one_of"}
        first.path = prefix
        first.alternatives = missing
    return [first]


def _echo(value: object) -> str:
    shown = repr(value)
    return shown if len(shown) <= ECHO_CHARS else shown[: ECHO_CHARS - 3] + "..."


def _one_line(message: str) -> str:
    return " ".join(message.split())


def _quoted_list(names: Sequence[str]) -> str:
    quoted = [repr(n) for n in names[:MAX_LISTED_KEYS]]
    if len(names) > MAX_LISTED_KEYS:
        quoted.append("...")
    if len(quoted) <= 1:
        return "".join(quoted)
    return ", ".join(quoted[:-1]) + " or " + quoted[-1]


def _suggest(word: object, choices: Sequence[str]) -> str:
    if not isinstance(word, str) or not choices:
        return ""
    folded = {c.casefold(): c for c in choices}
    if word.casefold() in folded and folded[word.casefold()] != word:
        return f"; did you mean {folded[word.casefold()]!r}?"
    close = difflib.get_close_matches(word, list(choices), n=1, cutoff=SUGGEST_CUTOFF)
    return f"; did you mean {close[0]!r}?" if close else ""


def _label(path: Path_) -> str:
    return format_path(path) or "top level"


def _mark_of(doc: YamlDoc, path: Path_, *, at_key: bool) -> tuple[int, int]:
    prefix, mark = doc.nearest(path)
    if prefix != tuple(path) or at_key:
        return mark.key
    return mark.value


def _detail(entry: _Entry, model: type[BaseModel] | None) -> str:
    """The part of the message after ``path: ``."""
    error = entry.error
    kind = entry.type
    ctx = error.get("ctx") or {}
    value = error.get("input")
    info = _field_at(model, entry.path)
    description = info.description if info is not None and info.description else ""
    if entry.key_error and kind in _EXPECTED:
        return f"the key {_echo(value)} must be {_EXPECTED[kind]}"
    if entry.alternatives and kind in _EXPECTED:
        return f"expected {' or '.join(entry.alternatives)}, got {_echo(value)}"
    if kind in _SHAPE_ERRORS and description:
        return f"expected {description}, got {_echo(value)}"
    if kind in _EXPECTED:
        return f"expected {_EXPECTED[kind]}, got {_echo(value)}"
    if kind in ("literal_error", "enum"):
        expected = str(ctx.get("expected", ""))
        allowed = [m.replace("\\'", "'") for m in _QUOTED_RE.findall(expected)]
        return f"got {_echo(value)}, expected one of {expected}{_suggest(value, allowed)}"
    if kind in ("greater_than", "greater_than_equal", "less_than", "less_than_equal"):
        bounds = (
            _bounds(info)
            or {
                "greater_than": f"more than {ctx.get('gt')}",
                "greater_than_equal": f"at least {ctx.get('ge')}",
                "less_than": f"less than {ctx.get('lt')}",
                "less_than_equal": f"at most {ctx.get('le')}",
            }[kind]
        )
        return f"got {_echo(value)}, must be {bounds}"
    if kind == "multiple_of":
        return f"got {_echo(value)}, must be a multiple of {ctx.get('multiple_of')}"
    if kind in ("too_short", "too_long"):
        limit = ctx.get("min_length") if kind == "too_short" else ctx.get("max_length")
        most = "at least" if kind == "too_short" else "at most"
        return f"expected {most} {limit} item(s), got {ctx.get('actual_length')}: {_echo(value)}"
    if kind == "string_too_short":
        return f"got {_echo(value)}, expected at least {ctx.get('min_length')} character(s)"
    if kind == "string_too_long":
        return f"got {_echo(value)}, expected at most {ctx.get('max_length')} character(s)"
    if kind == "string_pattern_mismatch":
        return f"got {_echo(value)}, which does not match the pattern {ctx.get('pattern')!r}"
    if kind == "union_tag_invalid":
        tags = [m.replace("\\'", "'") for m in _QUOTED_RE.findall(str(ctx.get("expected_tags")))]
        tag = ctx.get("tag")
        return f"unknown kind {_echo(tag)}{_suggest(tag, tags) or '.'} Allowed here: {_quoted_list(tags)}."
    message = str(error.get("msg", "is not valid"))
    for prefix in _PREFIXES:
        if message.startswith(prefix):
            message = message[len(prefix) :]
    if value is not None and not isinstance(value, dict | list):
        return f"{message} (got {_echo(value)})"
    return message


def _to_problem(
    entry: _Entry,
    *,
    file: str,
    doc: YamlDoc,
    known_keys: KnownKeys | None,
    model: type[BaseModel] | None,
) -> Problem:
    path = entry.path
    kind = entry.type
    code = _CODES.get(kind, "bad-value")
    if kind == "missing_one_of":
        line, col = _mark_of(doc, path, at_key=True)
        message = f"{_label(path)}: expected one of the settings {_quoted_list(entry.alternatives)}"
        return Problem("error", file, line, col, _one_line(message), format_path(path), code=code)
    if kind == "missing":
        parent, name = path[:-1], path[-1]
        line, col = _mark_of(doc, parent, at_key=True)
        if isinstance(name, int):
            info = _field_at(model, parent)
            want = info.description if info is not None and info.description else "more items"
            got = _echo(_value_at(doc, parent))
            message = f"{_label(parent)}: expected {want}, got {got} (item {name + 1} is missing)"
            code = "bad-length"
        else:
            message = f"{_label(parent)}: missing required field {name!r}"
        return Problem("error", file, line, col, _one_line(message), format_path(path), code=code)
    if kind == "extra_forbidden":
        parent, name = path[:-1], path[-1]
        line, col = _mark_of(doc, path, at_key=True)
        allowed: list[str] = []
        if known_keys is not None:
            allowed = list(known_keys(parent))
        elif model is not None:
            allowed = list(known_keys_from_model(model)(parent))
        allowed.extend(a for a in entry.alternatives if a not in allowed)
        message = f"{_label(path)}: unknown setting {str(name)!r}"
        if allowed:
            message += f"{_suggest(name, allowed) or '.'} Allowed here: {_quoted_list(allowed)}."
        else:
            message += "; remove it or check its indentation."
        return Problem("error", file, line, col, _one_line(message), format_path(path), code=code)
    if kind == "union_tag_invalid":
        tag = (entry.error.get("ctx") or {}).get("tag")
        tagged = (*path, tag) if isinstance(tag, str) and (*path, tag) in doc.marks else path
        line, col = _mark_of(doc, tagged, at_key=True)
    else:
        line, col = _mark_of(doc, path, at_key=entry.key_error)
    message = f"{_label(path)}: {_detail(entry, model)}"
    return Problem("error", file, line, col, _one_line(message), format_path(path), code=code)


def _value_at(doc: YamlDoc, path: Path_) -> object:
    node: object = doc.data
    for element in path:
        if not _has(node, element):
            return None
        node = _child(node, element)
    return node


def problems_from_validation(
    err: pydantic.ValidationError,
    *,
    file: str,
    doc: YamlDoc,
    known_keys: KnownKeys | None = None,
    model: type[BaseModel] | None = None,
) -> list[Problem]:
    """Turn a pydantic ``ValidationError`` into one :class:`Problem` per distinct error.

    Parameters
    ----------
    err : pydantic.ValidationError
        Raised by ``Model.model_validate(doc.data)``.
    file : str
        File name for the problem lines.
    doc : YamlDoc
        The document the data came from (for positions).
    known_keys : callable, optional
        ``known_keys(parent_path)`` gives the keys allowed in the mapping at ``parent_path``,
        used to suggest the closest one for an unknown key.
    model : type of BaseModel, optional
        The model that was validated; used, when ``known_keys`` is not given, to find the
        allowed keys, and always for field descriptions and bounds.

    Returns
    -------
    list of Problem
        In file order (line, then column). Unknown keys point at the key, missing fields at
        the mapping that lacks them (the nearest parent present in the file), other errors at
        the value. Each problem's ``path`` is the dotted path of the setting concerned (for a
        missing field, the path the field would have).
    """
    entries = [_entry(dict(e), doc.data) for e in err.errors(include_url=False)]
    problems = [
        _to_problem(e, file=file, doc=doc, known_keys=known_keys, model=model)
        for e in _prune(entries, 0)
    ]
    unique = list(dict.fromkeys(problems))
    return sorted(unique, key=lambda p: (p.line, p.column))


def problem_at(
    doc: YamlDoc,
    file: str,
    path: Sequence[str | int] | str,
    message: str,
    severity: str = "error",
    *,
    code: str,
) -> Problem:
    """Make a :class:`Problem` for a setting, pointing at it the same way validation does.

    For checks that pydantic cannot make (one setting against another, against the trial
    table or the screen).

    Parameters
    ----------
    doc : YamlDoc
        The document the protocol was read from.
    file : str
        File name for the problem line.
    path : sequence of str or int, or str
        The setting, as a tuple (``("sequence", 2, "blocks", "by")``) or in dotted form
        (``"sequence[2].blocks.by"``).
    message : str
        A plain sentence; it is prefixed with the dotted path.
    severity : str, optional
        ``"error"`` (default) or ``"warning"``.
    code : str
        The problem's code, from :data:`runner.errors.PROBLEM_CODES`.

    Returns
    -------
    Problem
        Pointing at the value when it is a single value, at the key when it is a list or
        mapping, and at the nearest parent present in the file when the setting is absent.
    """
    key_path = parse_path(path) if isinstance(path, str) else tuple(path)
    exists = key_path in doc.marks
    value = _value_at(doc, key_path) if exists else None
    at_key = not exists or isinstance(value, dict | list)
    line, col = _mark_of(doc, key_path, at_key=at_key)
    label = format_path(key_path)
    text = f"{label}: {message}" if label else message
    return Problem(severity, file, line, col, _one_line(text), label, code=code)


__all__ = [
    "format_path",
    "known_keys_from_model",
    "parse_path",
    "problem_at",
    "problems_from_validation",
]


# --------------------------------------------------------------------------------------------
# A 'where' selection that matches nothing.

#: At most this many of a column's values are listed in a message.
MAX_VALUES_LISTED = 12


def where_miss_message(
    where: Mapping[str, object],
    column_values: Mapping[str, Sequence[str]],
    matches: Callable[[str, object], bool],
) -> str:
    """Why a ``where`` selection matches no row, naming the values each column does have.

    ``column_values`` are the values found in each column of the trial table (in table order);
    ``matches(have, want)`` is the comparison the selection uses.
    """
    parts: list[str] = []
    for col, want in where.items():
        wanted = want if isinstance(want, list) else [want]
        have = list(dict.fromkeys(column_values.get(col, [])))
        missing = [w for w in wanted if not any(matches(h, w) for h in have)]
        if not missing:
            continue
        shown = ", ".join(repr(h) for h in have[:MAX_VALUES_LISTED])
        more = f" and {len(have) - MAX_VALUES_LISTED} more" if len(have) > MAX_VALUES_LISTED else ""
        near = _suggest(str(missing[0]), [str(h) for h in have])
        hint = f" ({near[2:]})" if near else ""
        parts.append(
            f"column {col!r} has no value {', '.join(repr(m) for m in missing)}{hint}; its values"
            f" are {shown}{more}"
        )
    if not parts:
        return (
            f"no row of the trial table has all of {dict(where)!r} at once; each value exists,"
            " but not together in one row"
        )
    return "no row of the trial table matches: " + "; ".join(parts)
