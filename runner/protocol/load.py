"""Load a protocol file: safe YAML, schema validation, then cross-checks against the trial table.

Every problem found is collected (not just the first) and raised together as one
:class:`~runner.errors.ProtocolError`, each pointing at the line and column it concerns.
"""

from __future__ import annotations

import hashlib
import math
from dataclasses import dataclass, field
from pathlib import Path

from pydantic import ValidationError

from runner.contract.layout import display_path
from runner.errors import InputFileError, Problem, ProtocolError
from runner.protocol.files import (
    FileProblem,
    check_image,
    read_regular,
    real_path,
    regular_file,
)
from runner.protocol.model import (
    BlocksStep,
    PageStep,
    PracticeStep,
    Protocol,
    TrialsStep,
    Where,
)
from runner.protocol.report import problem_at, problems_from_validation, where_miss_message
from runner.protocol.sizes import stimulus_box
from runner.protocol.table import TrialRow, TrialTable, read_trial_table
from runner.protocol.yamlsafe import MAX_YAML_BYTES, YamlDoc, read_yaml
from runner.session.views import answer_box_rect, answer_box_size, answer_fit_limits, hint_top

MAX_PAGE_BYTES = 256 * 1024
CONTROL_LIMIT = 0x20  # characters below this (NUL, tab, newline ...) never belong in a path


@dataclass(frozen=True)
class LoadedProtocol:
    """A validated protocol with everything it refers to read into memory.

    ``content_hash`` covers the protocol text, the trial table and page files, so the schedule
    (and its seed) change exactly when something that shapes the session changes.
    """

    path: Path
    model: Protocol
    table: TrialTable
    raw: bytes
    doc: YamlDoc
    content_hash: str
    pages: dict[int, str] = field(default_factory=dict)
    warnings: list[Problem] = field(default_factory=list)

    def stimulus_path(self, row: TrialRow) -> Path:
        return self.table.stimulus_path(row)


display_name = display_path  # how a file is named in problem lines


def select_rows(table: TrialTable, where: Where) -> list[TrialRow]:
    """Rows whose columns match every ``column: value`` (or ``column: [values]``) of ``where``."""

    def ok(row: TrialRow) -> bool:
        for col, want in where.items():
            have = row.value(col)
            wanted = want if isinstance(want, list) else [want]
            if not any(_same(have, w) for w in wanted):
                return False
        return True

    return [r for r in table.rows if ok(r)]


def _same(have: str, want: object) -> bool:
    if isinstance(want, bool):
        return have.lower() in (("true", "1", "yes") if want else ("false", "0", "no"))
    if isinstance(want, (int, float)):
        try:
            return float(have) == float(want)
        except ValueError:
            return False
    return have == str(want)


def answer_covers(model: Protocol, images: list[tuple[TrialRow, int, int]]) -> str:
    """Why the answer box of 'over' mode would cover a stimulus, or "" when it never does.

    ``images`` are the stimuli as ``(row, width, height)`` in pixels; each is scaled into the
    stimulus box and centred as the presenter shows it, and the box must fit below or beside it
    (:func:`runner.session.views.answer_box_rect`).
    """
    size = model.screen.resolution
    box = answer_box_size(model.screen.font_px)
    top = hint_top(size, model.screen.font_px)
    area = stimulus_box(model)
    bad: list[tuple[TrialRow, int, int]] = []
    for row, w, h in images:
        iw, ih = fit_within(w, h, *area)
        rect = (size[0] // 2 - iw // 2, size[1] // 2 - ih // 2, iw, ih)
        if answer_box_rect(size, rect, box, top) is None:
            bad.append((row, iw, ih))
    if not bad:
        return ""
    row, iw, ih = bad[0]
    max_h, max_w = answer_fit_limits(size, box, top)
    others = f" (and {len(bad) - 1} more stimuli)" if len(bad) > 1 else ""
    return (
        f"'over' needs room below or beside each stimulus for the answer box ({box[0]}x{box[1]} "
        f"px), but {row.stimulus!r}{others}, shown {iw}x{ih} px on the {size[0]}x{size[1]} "
        f"screen, leaves none, so the box would cover it. The box fits below a stimulus at most "
        f"{max_h} px high or beside one at most {max_w} px wide; make "
        "stimulus_size smaller (or screen.font_px), or use answer.mode: after"
    )


def fit_within(w: int, h: int, box_w: int, box_h: int) -> tuple[int, int]:
    """Largest size with the aspect ratio of (w, h) that fits in (box_w, box_h), as the
    presenter scales stimuli (runner.present.images.fit_within)."""
    scale = min(box_w / w, box_h / h)
    return max(1, round(w * scale)), max(1, round(h * scale))


def load_protocol(path: str | Path, *, check_stimuli: bool = True) -> LoadedProtocol:
    """Read, validate and cross-check a protocol.

    Parameters
    ----------
    path
        The protocol YAML file.
    check_stimuli
        Also require that every stimulus file in the trial table exists.

    Raises
    ------
    ProtocolError
        With one :class:`Problem` per problem found, errors only (warnings are kept on the result).
    """
    path = Path(path)
    name = display_name(path)
    try:
        # Before opening: a FIFO would block, /dev/zero would read without end.
        regular_file(path, "protocol file")
    except FileProblem as exc:
        if exc.code == "missing-file":
            raise InputFileError(
                f"The protocol file {name!r} does not exist; check the path and the spelling."
            ) from None
        raise InputFileError(f"{name}: {exc.message}; name the protocol's .yaml file.") from None
    doc = read_yaml(path)
    try:
        raw = read_regular(path, "protocol file", MAX_YAML_BYTES)
    except FileProblem as exc:
        raise InputFileError(f"{name}: {exc.message}.") from None
    try:
        model = Protocol.model_validate(doc.data)
    except ValidationError as exc:
        raise ProtocolError(
            problems_from_validation(exc, file=name, doc=doc, model=Protocol)
        ) from None

    problems: list[Problem] = []

    def at(loc: tuple[str | int, ...], message: str, *, code: str) -> None:
        problems.append(problem_at(doc, name, loc, message, code=code))

    table_path = real_path(path.parent / model.trials.table)
    table, table_problems = read_trial_table(table_path, display_name=display_name(table_path))
    if table is None:
        if table_problems and table_problems[0].line == 0 and not table_path.exists():
            at(
                ("trials", "table"),
                f"the trial table {model.trials.table!r} does not exist (looked for {table_path})",
                code="missing-file",
            )
        else:
            problems.extend(table_problems)
        raise ProtocolError(problems)

    columns = set(table.columns)
    known = ", ".join(table.columns)

    def need_column(loc: tuple[str | int, ...], col: str, what: str) -> None:
        if col not in columns:
            at(
                loc,
                f"{what} {col!r} is not a column of the trial table (columns: {known})",
                code="unknown-column",
            )

    for i, factor in enumerate(model.trials.factors):
        need_column(("trials", "factors", i), factor, "factor")
    if model.answer.prompt_column:
        need_column(("answer", "prompt_column"), model.answer.prompt_column, "column")
    if model.rating.question_column:
        need_column(("rating", "question_column"), model.rating.question_column, "column")
    for col in model.pilot.difficulty:
        loc = ("pilot", "difficulty", col)
        if col not in columns:
            need_column(loc, col, "the pilot's difficulty column")
            continue
        texts = [r.value(col) for r in table.rows if r.value(col).strip()]
        bad = next((t for t in texts if not _is_number(t)), None)
        if bad is not None:
            at(
                loc,
                f"the pilot's difficulty column {col!r} holds {bad!r}, not a number; weigh"
                " columns of numbers only",
                code="non-numeric-column",
            )

    pages: dict[int, str] = {}
    for i, step in enumerate(model.sequence):
        if isinstance(step, PageStep):
            if step.page.file is not None:
                page_path = real_path(path.parent / step.page.file)
                if not model.trials.allow_outside and not page_path.is_relative_to(
                    real_path(path.parent)
                ):
                    at(
                        ("sequence", i, "page", "file"),
                        f"the page file {step.page.file!r} lies outside the protocol's folder;"
                        " set trials.allow_outside: true if that is intended",
                        code="outside-folder",
                    )
                    continue
                try:
                    pages[i] = read_regular(page_path, "page file", MAX_PAGE_BYTES).decode("utf-8")
                except FileProblem as exc:
                    at(
                        ("sequence", i, "page", "file"),
                        f"{exc.message} ({step.page.file!r})",
                        code=exc.code,
                    )
                except UnicodeDecodeError:
                    at(
                        ("sequence", i, "page", "file"),
                        f"the page file {step.page.file!r} is not UTF-8 text",
                        code="not-utf8",
                    )
            else:
                pages[i] = step.page.text or ""
            continue
        if isinstance(step, (PracticeStep, BlocksStep, TrialsStep)):
            kind = (
                "practice"
                if isinstance(step, PracticeStep)
                else "blocks"
                if isinstance(step, BlocksStep)
                else "trials"
            )
            spec = getattr(step, kind)
            for col in spec.where:
                need_column(("sequence", i, kind, "where", col), col, "column")
            if all(col in columns for col in spec.where) and not select_rows(table, spec.where):
                at(
                    ("sequence", i, kind, "where"),
                    where_miss_message(
                        spec.where, {c: [r.value(c) for r in table.rows] for c in spec.where}, _same
                    ),
                    code="no-matching-rows",
                )
            for col in getattr(spec, "max_run", {}):
                need_column(("sequence", i, kind, "max_run", col), col, "column")
            if isinstance(step, BlocksStep):
                need_column(("sequence", i, "blocks", "by"), step.blocks.by, "block factor")
                if step.blocks.by in columns and all(col in columns for col in spec.where):
                    for row in select_rows(table, spec.where):
                        if not row.value(step.blocks.by).strip():
                            problems.append(
                                Problem(
                                    "error",
                                    display_name(table_path),
                                    row.line,
                                    1,
                                    f"row {row.row} has no value in the block factor "
                                    f"{step.blocks.by!r}, so it would make a block of its own; "
                                    "fill it in or leave the row out with 'where'",
                                    code="empty-factor-cell",
                                )
                            )
                if step.blocks.order == "fixed" and not step.blocks.levels:
                    at(
                        ("sequence", i, "blocks", "levels"),
                        "order 'fixed' needs the list of levels in block order",
                        code="bad-levels",
                    )
                if step.blocks.by in columns and step.blocks.levels:
                    rows = select_rows(table, spec.where)
                    present = sorted({r.value(step.blocks.by) for r in rows})
                    listed = [str(v) for v in step.blocks.levels]
                    if sorted(set(listed)) != present or len(listed) != len(set(listed)):
                        at(
                            ("sequence", i, "blocks", "levels"),
                            f"levels {listed!r} must list each level of {step.blocks.by!r} once: {present!r}",
                            code="bad-levels",
                        )

    shown: dict[Path, tuple[TrialRow, int, int]] = {}
    for row in table.rows:
        if row.expected is not None and row.expected > model.answer.max:
            problems.append(
                Problem(
                    "error",
                    display_name(table_path),
                    row.line,
                    1,
                    f"expected count {row.expected} is above answer.max ({model.answer.max})",
                    code="answer-above-max",
                )
            )
        if check_stimuli:
            if any(ord(ch) < CONTROL_LIMIT for ch in row.stimulus):
                # The file system refuses such names outright (a NUL byte raises ValueError).
                problems.append(
                    Problem(
                        "error",
                        display_name(table_path),
                        row.line,
                        1,
                        f"stimulus {row.stimulus!r} contains a control character; retype the path",
                        code="control-character",
                    )
                )
                continue
            stim = table.stimulus_path(row)
            if not model.trials.allow_outside and not stim.is_relative_to(real_path(path.parent)):
                problems.append(
                    Problem(
                        "error",
                        display_name(table_path),
                        row.line,
                        1,
                        f"stimulus {row.stimulus!r} lies outside the protocol's folder;"
                        " set trials.allow_outside: true if that is intended",
                        code="outside-folder",
                    )
                )
            else:
                try:
                    info = check_image(stim)
                    shown.setdefault(stim, (row, info.width, info.height))
                except FileProblem as exc:
                    problems.append(
                        Problem(
                            "error",
                            display_name(table_path),
                            row.line,
                            1,
                            f"stimulus {row.stimulus!r}: {exc.message} (looked for {stim})",
                            code=exc.code,
                        )
                    )
    if model.answer.mode == "over" and shown:
        covered = answer_covers(model, [(r, w, h) for r, w, h in shown.values()])
        if covered:
            at(("answer", "mode"), covered, code="answer-covers-stimulus")
    if problems:
        raise ProtocolError(problems)

    digest = hashlib.sha256()
    for part in (b"protocol", raw, b"table", table.raw):
        digest.update(len(part).to_bytes(8, "little"))
        digest.update(part)
    for i in sorted(pages):
        digest.update(pages[i].encode("utf-8"))
    return LoadedProtocol(
        path=real_path(path),
        model=model,
        table=table,
        raw=raw,
        doc=doc,
        content_hash=digest.hexdigest(),
        pages=pages,
    )


def _is_number(text: str) -> bool:
    """Whether a table cell reads as a finite number."""
    try:
        return math.isfinite(float(text))
    except ValueError:
        return False
