"""The stimulus spec: a YAML file saying which diagrams to make, read with line marks.

Every problem found is reported at once as ``FILE:LINE:COL: error: message``, naming the field
by its path (``sets[1].densities.dense``), echoing the value and listing what is allowed.
docs/stimuli.md describes every field.

Length: one module on purpose: the spec's fields and their checks read top to bottom in the
order docs/stimuli.md lists them.
"""

from __future__ import annotations

import difflib
import re
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

import yaml

from runner.errors import InputFileError, Problem, ProtocolError, UsageError
from runner.graphs.families import FAMILIES, check_density
from runner.graphs.layout import LAYOUTS
from runner.graphs.paths import PAIR_STRATEGIES, PairRule
from runner.graphs.render import TARGET_MARKERS, Style

MAX_SPEC_BYTES = 1_000_000
MAX_NODES = 1000
MIN_NODES = 3
MAX_INSTANCES = 1000
MAX_CANVAS_PX = 8000
MAX_ATTEMPTS = 1000
FORMATS = ("png", "svg")
UNREADABLE_POLICIES = ("fail", "keep_best")
# Names end up in file names and in the manifest, so they stay plain.
NAME_RE = re.compile(r"^[A-Za-z0-9][A-Za-z0-9-]*$")
COLOUR_RE = re.compile(r"^#[0-9a-fA-F]{6}$")


@dataclass(frozen=True)
class Canvas:
    """Image size, empty border and background colour, in pixels and ``#rrggbb``."""

    width: int = 1000
    height: int = 1000
    margin: int = 50
    background: str = "#8c8c8c"


@dataclass(frozen=True)
class ReadabilityRule:
    """Readability limits and what to do when a drawing cannot meet them."""

    min_node_distance: float = 22.0
    link_clearance: float = 9.0
    attempts: int = 30
    if_unreadable: str = "fail"


@dataclass(frozen=True)
class SetSpec:
    """One grid of stimuli: sizes x densities x instances of one family and layout."""

    name: str
    family: str
    layout: str
    sizes: tuple[int, ...]
    densities: tuple[tuple[str, float], ...]
    instances: int
    pairs: PairRule
    rewire: float
    line: int = 0
    column: int = 0


@dataclass(frozen=True)
class StimulusSpec:
    """A whole stimulus spec, validated."""

    file: str
    seed: int
    canvas: Canvas
    style: Style
    readability: ReadabilityRule
    count_targets: bool
    formats: tuple[str, ...]
    sets: tuple[SetSpec, ...] = field(default_factory=tuple)


class _Reader:
    """Walks a composed YAML tree, converting values and collecting problems with marks."""

    def __init__(self, file: str):
        self.file = file
        self.problems: list[Problem] = []
        self._loader = yaml.SafeLoader("")

    def error(self, node: yaml.Node | None, path: str, message: str, *, code: str) -> None:
        line = node.start_mark.line + 1 if node is not None else 0
        col = node.start_mark.column + 1 if node is not None else 0
        self.problems.append(Problem("error", self.file, line, col, message, path, code=code))

    def value(self, node: yaml.Node) -> Any:
        return self._loader.construct_object(node, deep=True)

    def mapping(
        self, node: yaml.Node, path: str, allowed: tuple[str, ...]
    ) -> dict[str, yaml.Node] | None:
        if not isinstance(node, yaml.MappingNode):
            where = path or "the spec"
            self.error(
                node, path, f"{where} must be a mapping of keys to values.", code="not-a-mapping"
            )
            return None
        out: dict[str, yaml.Node] = {}
        for key_node, value_node in node.value:
            key = self.value(key_node)
            name = f"{path}.{key}" if path else str(key)
            if not isinstance(key, str) or key not in allowed:
                close = difflib.get_close_matches(str(key), allowed, n=1)
                hint = f" Did you mean {close[0]!r}?" if close else ""
                self.error(
                    key_node,
                    name,
                    f"Unknown key {key!r} in {path or 'the spec'}; allowed keys are "
                    f"{', '.join(allowed)}.{hint}",
                    code="unknown-field",
                )
                continue
            if key in out:
                self.error(
                    key_node,
                    name,
                    f"The key {name} is given twice; keep one.",
                    code="duplicate-key",
                )
                continue
            out[key] = value_node
        return out

    def number(
        self,
        node: yaml.Node,
        path: str,
        *,
        lo: float,
        hi: float,
        integer: bool,
    ) -> float | int | None:
        v = self.value(node)
        kind = "a whole number" if integer else "a number"
        ok_type = isinstance(v, int) if integer else isinstance(v, int | float)
        if isinstance(v, bool) or not ok_type:
            self.error(
                node, path, f"{path} must be {kind} from {lo} to {hi}, not {v!r}.", code="bad-type"
            )
            return None
        if not lo <= v <= hi:
            self.error(
                node, path, f"{path} must lie from {lo} to {hi}, not {v!r}.", code="out-of-range"
            )
            return None
        return int(v) if integer else float(v)

    def choice(self, node: yaml.Node, path: str, options: tuple[str, ...]) -> str | None:
        v = self.value(node)
        if v not in options:
            close = difflib.get_close_matches(str(v), options, n=1)
            hint = f" Did you mean {close[0]!r}?" if close else ""
            self.error(
                node,
                path,
                f"{path} is {v!r}; use one of {', '.join(options)}.{hint}",
                code="bad-choice",
            )
            return None
        return str(v)

    def flag(self, node: yaml.Node, path: str) -> bool | None:
        v = self.value(node)
        if not isinstance(v, bool):
            self.error(node, path, f"{path} must be true or false, not {v!r}.", code="bad-type")
            return None
        return v

    def colour(self, node: yaml.Node, path: str) -> str | None:
        v = self.value(node)
        if not isinstance(v, str) or not COLOUR_RE.fullmatch(v):
            self.error(
                node,
                path,
                f"{path} must be a colour written #rrggbb (in quotes), not {v!r}.",
                code="bad-pattern",
            )
            return None
        return v.lower()

    def name(self, node: yaml.Node, path: str) -> str | None:
        v = self.value(node)
        if not isinstance(v, str) or not NAME_RE.fullmatch(v):
            self.error(
                node,
                path,
                f"{path} is {v!r}; names go into file names, so use letters, digits and "
                "hyphens only, starting with a letter or digit.",
                code="bad-pattern",
            )
            return None
        return v

    def sequence(self, node: yaml.Node, path: str) -> list[yaml.Node] | None:
        if not isinstance(node, yaml.SequenceNode):
            self.error(
                node, path, f"{path} must be a list, not {self.value(node)!r}.", code="bad-type"
            )
            return None
        return list(node.value)


def _canvas(r: _Reader, node: yaml.Node) -> Canvas:
    m = r.mapping(node, "canvas", ("size_px", "margin_px", "background")) or {}
    width, height, margin, bg = Canvas.width, Canvas.height, Canvas.margin, Canvas.background
    if "size_px" in m:
        items = r.sequence(m["size_px"], "canvas.size_px")
        if items is not None and len(items) != 2:
            r.error(
                m["size_px"],
                "canvas.size_px",
                "canvas.size_px must be [width, height].",
                code="bad-length",
            )
        elif items is not None:
            w = r.number(items[0], "canvas.size_px[0]", lo=100, hi=MAX_CANVAS_PX, integer=True)
            h = r.number(items[1], "canvas.size_px[1]", lo=100, hi=MAX_CANVAS_PX, integer=True)
            width, height = int(w or width), int(h or height)
    if "margin_px" in m:
        v = r.number(
            m["margin_px"], "canvas.margin_px", lo=0, hi=min(width, height) // 3, integer=True
        )
        margin = int(v) if v is not None else margin
    if "background" in m:
        bg = r.colour(m["background"], "canvas.background") or bg
    return Canvas(width=width, height=height, margin=margin, background=bg)


_STYLE_SIZES = (
    "node_size_px",
    "link_width_px",
    "target_size_px",
    "target_edge_px",
    "label_size_px",
)
_STYLE_COLOURS = ("node_color", "link_color", "target_edge_color", "label_color")


def _style(r: _Reader, node: yaml.Node, background: str) -> Style:
    allowed = _STYLE_SIZES + _STYLE_COLOURS + ("target_shapes", "target_colors", "labels")
    m = r.mapping(node, "style", allowed) or {}
    kw: dict[str, Any] = {"background": background}
    v: float | str | None
    for key in _STYLE_SIZES:
        if key in m:
            v = r.number(m[key], f"style.{key}", lo=0.5, hi=200, integer=False)
            if v is not None:
                kw[key] = v
    for key in _STYLE_COLOURS:
        if key in m:
            v = r.colour(m[key], f"style.{key}")
            if v is not None:
                kw[key] = v
    if "labels" in m:
        v = r.flag(m["labels"], "style.labels")
        if v is not None:
            kw["labels"] = v
    if "target_shapes" in m:
        items = r.sequence(m["target_shapes"], "style.target_shapes")
        if items is not None and len(items) == 2:
            shapes = [
                r.choice(n, f"style.target_shapes[{i}]", tuple(TARGET_MARKERS))
                for i, n in enumerate(items)
            ]
            if None not in shapes:
                if shapes[0] == shapes[1]:
                    r.error(
                        m["target_shapes"],
                        "style.target_shapes",
                        "The two targets need different shapes, so they differ for readers "
                        "who cannot tell the colours apart.",
                        code="bad-value",
                    )
                else:
                    kw["target_shapes"] = tuple(shapes)
        elif items is not None:
            r.error(
                m["target_shapes"],
                "style.target_shapes",
                "style.target_shapes must list two shapes.",
                code="bad-length",
            )
    if "target_colors" in m:
        items = r.sequence(m["target_colors"], "style.target_colors")
        if items is not None and len(items) == 2:
            colours = [r.colour(n, f"style.target_colors[{i}]") for i, n in enumerate(items)]
            if None not in colours:
                kw["target_colors"] = tuple(colours)
        elif items is not None:
            r.error(
                m["target_colors"],
                "style.target_colors",
                "style.target_colors must list two colours.",
                code="bad-length",
            )
    return Style(**kw)


def _readability(r: _Reader, node: yaml.Node) -> ReadabilityRule:
    keys = ("min_node_distance_px", "link_clearance_px", "attempts", "if_unreadable")
    m = r.mapping(node, "readability", keys) or {}
    d = ReadabilityRule()
    dist = d.min_node_distance
    clear = d.link_clearance
    attempts = d.attempts
    policy = d.if_unreadable
    if "min_node_distance_px" in m:
        v = r.number(
            m["min_node_distance_px"],
            "readability.min_node_distance_px",
            lo=0,
            hi=500,
            integer=False,
        )
        dist = v if v is not None else dist
    if "link_clearance_px" in m:
        v = r.number(
            m["link_clearance_px"], "readability.link_clearance_px", lo=0, hi=200, integer=False
        )
        clear = v if v is not None else clear
    if "attempts" in m:
        v = r.number(m["attempts"], "readability.attempts", lo=1, hi=MAX_ATTEMPTS, integer=True)
        attempts = int(v) if v is not None else attempts
    if "if_unreadable" in m:
        policy = (
            r.choice(m["if_unreadable"], "readability.if_unreadable", UNREADABLE_POLICIES) or policy
        )
    return ReadabilityRule(float(dist), float(clear), attempts, policy)


def _pairs(r: _Reader, node: yaml.Node, path: str) -> PairRule:
    keys = ("strategy", "path_links", "max_routes", "prefer_few_routes")
    m = r.mapping(node, path, keys) or {}
    strategy = "path_length"
    if "strategy" in m:
        strategy = r.choice(m["strategy"], f"{path}.strategy", PAIR_STRATEGIES) or strategy
    links: tuple[int, int] | None = None
    if "path_links" in m:
        items = r.sequence(m["path_links"], f"{path}.path_links")
        if items is not None and len(items) == 2:
            lo = r.number(items[0], f"{path}.path_links[0]", lo=1, hi=MAX_NODES, integer=True)
            hi = r.number(items[1], f"{path}.path_links[1]", lo=1, hi=MAX_NODES, integer=True)
            if lo is not None and hi is not None:
                if lo > hi:
                    r.error(
                        m["path_links"],
                        f"{path}.path_links",
                        f"{path}.path_links is [{lo}, {hi}]; give the shorter length first.",
                        code="bad-value",
                    )
                else:
                    links = (int(lo), int(hi))
        elif items is not None:
            r.error(
                m["path_links"],
                f"{path}.path_links",
                f"{path}.path_links must be [shortest, longest], in links.",
                code="bad-length",
            )
    elif strategy == "path_length":
        r.error(
            node,
            f"{path}.path_links",
            f"The path_length strategy needs {path}.path_links: [shortest, longest].",
            code="missing-field",
        )
    max_routes = None
    if "max_routes" in m:
        v = r.number(m["max_routes"], f"{path}.max_routes", lo=1, hi=10**9, integer=True)
        max_routes = int(v) if v is not None else None
    prefer = True
    if "prefer_few_routes" in m:
        v = r.flag(m["prefer_few_routes"], f"{path}.prefer_few_routes")
        prefer = v if v is not None else prefer
    return PairRule(
        strategy=strategy, path_links=links, max_routes=max_routes, prefer_few_routes=prefer
    )


_SET_KEYS = ("name", "family", "layout", "sizes", "densities", "instances", "pairs", "rewire")


def _set(r: _Reader, node: yaml.Node, path: str) -> SetSpec | None:
    m = r.mapping(node, path, _SET_KEYS)
    if m is None:
        return None
    before = len(r.problems)
    for key in ("name", "family", "sizes", "densities", "pairs"):
        if key not in m:
            r.error(
                node,
                f"{path}.{key}",
                f"{path} has no {key!r}; every set needs one.",
                code="missing-field",
            )
    name = r.name(m["name"], f"{path}.name") if "name" in m else None
    family = r.choice(m["family"], f"{path}.family", FAMILIES) if "family" in m else None
    layout = r.choice(m["layout"], f"{path}.layout", LAYOUTS) if "layout" in m else "stress"
    sizes: list[int] = []
    if "sizes" in m:
        for i, item in enumerate(r.sequence(m["sizes"], f"{path}.sizes") or []):
            v = r.number(item, f"{path}.sizes[{i}]", lo=MIN_NODES, hi=MAX_NODES, integer=True)
            if v is not None:
                sizes.append(int(v))
        if len(set(sizes)) != len(sizes):
            r.error(
                m["sizes"],
                f"{path}.sizes",
                f"{path}.sizes lists a size twice; each size once.",
                code="bad-value",
            )
    densities: list[tuple[str, float]] = []
    if "densities" in m:
        dm = m["densities"]
        if not isinstance(dm, yaml.MappingNode) or not dm.value:
            r.error(
                dm,
                f"{path}.densities",
                f"{path}.densities must map level names to links per node, e.g. {{sparse: 1.2}}.",
                code="not-a-mapping",
            )
        else:
            for key_node, value_node in dm.value:
                level = r.name(key_node, f"{path}.densities")
                dpath = f"{path}.densities.{level}"
                v = r.number(value_node, dpath, lo=0.5, hi=MAX_NODES / 2, integer=False)
                if level is None or v is None:
                    continue
                for n in sizes:
                    try:
                        check_density(n, v)
                    except UsageError as exc:
                        r.error(value_node, dpath, str(exc), code="out-of-range")
                if family == "small_world" and v < 1:
                    r.error(
                        value_node,
                        dpath,
                        f"{dpath} is {v}; small-world graphs need at least 1 link per node.",
                        code="out-of-range",
                    )
                densities.append((level, v))
            if len({lv for lv, _ in densities}) != len(densities):
                r.error(
                    dm,
                    f"{path}.densities",
                    f"{path}.densities names a level twice.",
                    code="duplicate-key",
                )
    instances = 1
    if "instances" in m:
        v = r.number(m["instances"], f"{path}.instances", lo=1, hi=MAX_INSTANCES, integer=True)
        instances = int(v) if v is not None else instances
    rewire = 0.1
    if "rewire" in m:
        v = r.number(m["rewire"], f"{path}.rewire", lo=0.0, hi=1.0, integer=False)
        rewire = float(v) if v is not None else rewire
    pairs = _pairs(r, m["pairs"], f"{path}.pairs") if "pairs" in m else PairRule()
    if len(r.problems) > before or name is None or family is None or layout is None:
        return None
    return SetSpec(
        name=name,
        family=family,
        layout=layout,
        sizes=tuple(sizes),
        densities=tuple(densities),
        instances=instances,
        pairs=pairs,
        rewire=rewire,
        line=node.start_mark.line + 1,
        column=node.start_mark.column + 1,
    )


_TOP_KEYS = ("seed", "canvas", "style", "readability", "count_targets", "formats", "sets")


def parse_spec(text: str, *, file: str = "<spec>") -> StimulusSpec:
    """Validate a stimulus spec given as YAML text.

    Parameters
    ----------
    text : str
        The YAML document.
    file : str, optional
        Name used in problem lines.

    Returns
    -------
    StimulusSpec
        The validated spec.

    Raises
    ------
    ProtocolError
        With one :class:`~runner.errors.Problem` per mistake, each with its line and column.
    """
    r = _Reader(file)
    try:
        root = yaml.compose(text, Loader=yaml.SafeLoader)
    except yaml.MarkedYAMLError as exc:
        mark = exc.problem_mark or exc.context_mark
        line, col = (mark.line + 1, mark.column + 1) if mark else (0, 0)
        what = exc.problem or "it is not valid YAML"
        raise ProtocolError(
            [
                Problem(
                    "error",
                    file,
                    line,
                    col,
                    f"The spec cannot be read as YAML: {what}.",
                    code="yaml-syntax",
                )
            ]
        ) from exc
    if root is None:
        raise ProtocolError(
            [Problem("error", file, 0, 0, "The spec file is empty.", code="empty-file")]
        )
    m = r.mapping(root, "", _TOP_KEYS)
    if m is None:
        raise ProtocolError(r.problems)
    seed = 0
    if "seed" in m:
        v = r.number(m["seed"], "seed", lo=0, hi=2**32 - 1, integer=True)
        seed = int(v) if v is not None else seed
    else:
        r.error(
            root,
            "seed",
            "The spec has no 'seed'; add one (any whole number) so the stimuli can be made again.",
            code="missing-field",
        )
    canvas = _canvas(r, m["canvas"]) if "canvas" in m else Canvas()
    style = (
        _style(r, m["style"], canvas.background)
        if "style" in m
        else Style(background=canvas.background)
    )
    readability = _readability(r, m["readability"]) if "readability" in m else ReadabilityRule()
    count_targets = False
    if "count_targets" in m:
        v = r.flag(m["count_targets"], "count_targets")
        count_targets = v if v is not None else count_targets
    else:
        r.error(
            root,
            "count_targets",
            "The spec must say whether the two marked nodes count in the answer: add "
            "'count_targets: false' (count only the nodes between them) or 'count_targets: true'.",
            code="missing-field",
        )
    formats: list[str] = ["png"]
    if "formats" in m:
        items = r.sequence(m["formats"], "formats")
        if items is not None:
            formats = [
                f for i, n in enumerate(items) if (f := r.choice(n, f"formats[{i}]", FORMATS))
            ]
            if "png" not in formats:
                r.error(
                    m["formats"],
                    "formats",
                    "formats must include png (the presenter shows PNG files).",
                    code="bad-value",
                )
    sets: list[SetSpec] = []
    if "sets" not in m:
        r.error(
            root,
            "sets",
            "The spec has no 'sets'; list at least one set of stimuli.",
            code="missing-field",
        )
    else:
        items = r.sequence(m["sets"], "sets") or []
        if not items and isinstance(m["sets"], yaml.SequenceNode):
            r.error(
                m["sets"],
                "sets",
                "sets is empty; list at least one set of stimuli.",
                code="bad-length",
            )
        for i, item in enumerate(items):
            s = _set(r, item, f"sets[{i}]")
            if s is not None:
                if any(other.name == s.name for other in sets):
                    r.error(
                        item,
                        f"sets[{i}].name",
                        f"Two sets are named {s.name!r}; give each set its own name.",
                        code="bad-value",
                    )
                sets.append(s)
    if r.problems:
        raise ProtocolError(r.problems)
    return StimulusSpec(
        file=file,
        seed=seed,
        canvas=canvas,
        style=style,
        readability=readability,
        count_targets=count_targets,
        formats=tuple(formats),
        sets=tuple(sets),
    )


def load_spec(path: Path) -> StimulusSpec:
    """Read and validate a stimulus spec file.

    Parameters
    ----------
    path : pathlib.Path
        The YAML spec.

    Returns
    -------
    StimulusSpec
        The validated spec.

    Raises
    ------
    InputFileError
        If the file is missing, unreadable or too large.
    ProtocolError
        If the spec has mistakes (one problem line each).
    """
    path = Path(path)
    if not path.is_file():
        raise InputFileError(
            f"The stimulus spec {path} does not exist; check the path and the spelling."
        )
    if path.stat().st_size > MAX_SPEC_BYTES:
        raise InputFileError(
            f"The stimulus spec {path} is larger than {MAX_SPEC_BYTES} bytes; is it the right file?"
        )
    try:
        text = path.read_text(encoding="utf-8")
    except (OSError, UnicodeDecodeError) as exc:
        raise InputFileError(
            f"The stimulus spec {path} cannot be read as UTF-8 text: {exc}."
        ) from exc
    return parse_spec(text, file=str(path))
