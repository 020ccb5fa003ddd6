"""Summary tables of a pooled trials table, pilot facts, and the one-call ``write_summary``.

The tables are plain pandas DataFrames so the CLI, the export step and users' scripts can use
them directly. :func:`write_summary` writes them as CSV, draws the plots (:mod:`runner.data.plots`)
and builds one self-contained HTML report (:mod:`runner.data.report`).

Conventions used throughout (also in docs/analysis-summary.md):

* Outcome shares are counted over *scored* trials (outcome correct, wrong, unsure or unanswered);
  trials without an expected answer (outcome "unscored") are counted separately.
* Response-time statistics use trials answered with a number (outcome correct or wrong) that have
  a response time; "unsure" presses and timeouts are left out because they measure something else.
* Only main-part trials are summarised unless asked otherwise; practice is left out.
"""

from __future__ import annotations

import json
import math
import re
from collections.abc import Mapping, Sequence
from pathlib import Path
from typing import TYPE_CHECKING, Any

import numpy as np
import pandas as pd

from runner.contract.columns import CONTRACT_COLUMNS, PILOT_COLUMNS
from runner.contract.outputs import prepare_output_folder, replace_file
from runner.data import plots
from runner.data.exclusions import EXCLUSIONS_NAME
from runner.data.stats import mean_ci
from runner.data.summary_report import CEILING_SHARE, FLOOR_SHARE, OUTCOMES, build_report
from runner.data.tables import round_facts, write_table
from runner.errors import InputFileError, StorageError

if TYPE_CHECKING:
    from runner.data.load_curve import PhysioTable

UNSCORED = "unscored"
ANSWERED = ("correct", "wrong")
DEFAULT_RATING_POINTS = 9
MAIN_PART = "main"

# The trials.csv columns the summary reads (see runner.session.records).
#: The command a summary folder's marker names.
SUMMARY_COMMAND = "trialdeck summary"
TRIAL_COLUMNS = (*CONTRACT_COLUMNS, "part", "outcome", "rating_rt_ms", "timed_out")
REQUIRED_FOR_SUMMARY = ("participant", "session", "stimulus", "outcome", "rt_ms", "rating", "part")
SESSION_COLUMNS = ("participant", "session", "started_wall", "duration_s", "n_trials", "aborted")
PILOT_COLUMN = PILOT_COLUMNS[0]
_SAFE_NAME = re.compile(r"[^A-Za-z0-9_-]+")


# --------------------------------------------------------------------------------------------
# Checks and helpers
# --------------------------------------------------------------------------------------------


def _require(table: pd.DataFrame, columns: Sequence[str], what: str) -> None:
    missing = [c for c in columns if c not in table.columns]
    if missing:
        raise InputFileError(
            f"The {what} table lacks the column(s) "
            + ", ".join(repr(c) for c in missing)
            + "; export the tables again from the session journals, or check the factor names."
        )


def _check_outcomes(trials: pd.DataFrame) -> None:
    known = {*OUTCOMES, UNSCORED}
    seen = set(trials["outcome"].dropna().astype(str).unique())
    unknown = sorted(seen - known)
    if unknown or trials["outcome"].isna().any():
        shown = ", ".join(repr(u) for u in unknown) if unknown else "an empty value"
        raise InputFileError(
            f"The trials table has outcome {shown}; each trial's outcome must be one of "
            + ", ".join(sorted(known))
            + ". Export trials.csv again from the session journals."
        )


def _ratings(trials: pd.DataFrame, rating_points: int) -> pd.Series:
    ratings = pd.to_numeric(trials["rating"], errors="coerce").astype(float)
    bad = ratings.notna() & ~ratings.isin(np.arange(1, rating_points + 1, dtype=float))
    if bad.any():
        raise InputFileError(
            f"The trials table has ratings {sorted(set(ratings[bad].tolist()))} outside the "
            f"{rating_points}-point scale; pass the protocol's number of rating points "
            "(rating_points) to the summary."
        )
    return ratings


def _ordered_levels(values: pd.Series, order: Sequence[Any] | None) -> list[Any]:
    present = list(pd.unique(values.dropna()))
    if order is not None:
        wanted = [level for level in order if level in set(present)]
        rest = [level for level in present if level not in set(order)]
        return wanted + sorted(rest, key=str)
    if isinstance(values.dtype, pd.CategoricalDtype):
        return [c for c in values.cat.categories if c in set(present)]
    if pd.api.types.is_numeric_dtype(values.dtype):
        return sorted(present)
    return sorted(present, key=str)


def rating_columns(rating_points: int) -> list[str]:
    """Names of the per-point rating count columns: ``rating_1`` ... ``rating_<points>``."""
    return [f"rating_{k}" for k in range(1, rating_points + 1)]


def _group_rows(
    trials: pd.DataFrame, by: str, levels: Sequence[Any], rating_points: int
) -> pd.DataFrame:
    # Work on plain arrays and precomputed row positions per level: with hundreds of
    # participants, comparing the whole column once per group dominates otherwise.
    outcome = trials["outcome"].astype(str).to_numpy()
    ratings = _ratings(trials, rating_points).to_numpy()
    rt = pd.to_numeric(trials["rt_ms"], errors="coerce").astype(float).to_numpy()
    answered_rt = np.where(np.isin(outcome, ANSWERED), rt, np.nan)
    positions = trials.groupby(by, sort=False, dropna=True).indices
    empty = np.empty(0, dtype=np.intp)
    rows = []
    for level in levels:
        where = positions.get(level, empty)
        out = outcome[where]
        counts = {name: int((out == name).sum()) for name in OUTCOMES}
        n_scored = sum(counts.values())
        rts = answered_rt[where]
        rts = rts[np.isfinite(rts)]
        mean, low, high = mean_ci(rts)
        lvl_ratings = ratings[where]
        rated = lvl_ratings[np.isfinite(lvl_ratings)]
        row: dict[str, Any] = {
            by: level,
            "n_trials": int(where.size),
            "n_scored": n_scored,
            **{f"n_{name}": counts[name] for name in OUTCOMES},
            "n_unscored": int((out == UNSCORED).sum()),
            **{
                f"share_{name}": (counts[name] / n_scored if n_scored else math.nan)
                for name in OUTCOMES
            },
            "rt_n": int(rts.size),
            "rt_mean_ms": mean,
            "rt_median_ms": float(np.median(rts)) if rts.size else math.nan,
            "rt_ci_low_ms": low,
            "rt_ci_high_ms": high,
            "rating_n": int(rated.size),
            "rating_mean": float(rated.mean()) if rated.size else math.nan,
            **{
                col: int((rated == k).sum())
                for k, col in enumerate(rating_columns(rating_points), start=1)
            },
            "rating_none": int(lvl_ratings.size - rated.size),
        }
        rows.append(row)
    return pd.DataFrame(rows, columns=_summary_columns(by, rating_points))


def _summary_columns(by: str, rating_points: int) -> list[str]:
    return [
        by,
        "n_trials",
        "n_scored",
        *[f"n_{name}" for name in OUTCOMES],
        "n_unscored",
        *[f"share_{name}" for name in OUTCOMES],
        "rt_n",
        "rt_mean_ms",
        "rt_median_ms",
        "rt_ci_low_ms",
        "rt_ci_high_ms",
        "rating_n",
        "rating_mean",
        *rating_columns(rating_points),
        "rating_none",
    ]


# --------------------------------------------------------------------------------------------
# Public tables
# --------------------------------------------------------------------------------------------


def level_summary(
    trials: pd.DataFrame,
    factor: str,
    *,
    rating_points: int = DEFAULT_RATING_POINTS,
    levels: Sequence[Any] | None = None,
) -> pd.DataFrame:
    """Summarise trials per level of one factor.

    Parameters
    ----------
    trials : pd.DataFrame
        Pooled trials table (contract columns), already limited to the trials to summarise.
    factor : str
        Column to group by, for example ``"nodes"`` or ``"density"``.
    rating_points : int, optional
        Number of points on the rating scale, default 9.
    levels : sequence, optional
        Order of the levels; default numeric order for numbers, category order for categoricals,
        alphabetical otherwise. Levels not in the table are skipped.

    Returns
    -------
    pd.DataFrame
        One row per level: the factor, ``n_trials``, ``n_scored``, counts and shares of correct,
        wrong, unsure and unanswered (shares over scored trials), ``n_unscored``, response time
        ``rt_n``, ``rt_mean_ms``, ``rt_median_ms``, ``rt_ci_low_ms``, ``rt_ci_high_ms`` (95% t
        interval, answered trials only), ``rating_n``, ``rating_mean``, ``rating_1`` ...
        ``rating_<points>`` and ``rating_none``.

    Raises
    ------
    InputFileError
        If a column is missing, an outcome is unknown or a rating is off the scale.
    """
    _require(trials, (*REQUIRED_FOR_SUMMARY, factor), "trials")
    _check_outcomes(trials)
    return _group_rows(trials, factor, _ordered_levels(trials[factor], levels), rating_points)


def participant_summary(
    trials: pd.DataFrame, *, rating_points: int = DEFAULT_RATING_POINTS
) -> pd.DataFrame:
    """Summarise trials per participant, with the same columns as :func:`level_summary`.

    Adds ``n_sessions`` after ``participant``.

    Parameters
    ----------
    trials : pd.DataFrame
        Pooled trials table (contract columns).
    rating_points : int, optional
        Number of points on the rating scale, default 9.

    Returns
    -------
    pd.DataFrame
        One row per participant, in alphabetical order of the label.
    """
    _require(trials, REQUIRED_FOR_SUMMARY, "trials")
    _check_outcomes(trials)
    work = trials.assign(participant=trials["participant"].astype(str))
    table = _group_rows(
        work, "participant", _ordered_levels(work["participant"], None), rating_points
    )
    sessions = work.groupby("participant")["session"].nunique()
    table.insert(1, "n_sessions", table["participant"].map(sessions).astype(int))
    return table


def infer_factors(trials: pd.DataFrame) -> list[str]:
    """The trial table's own columns: every column that is not a contract or pilot column."""
    known = {*TRIAL_COLUMNS, PILOT_COLUMN}
    return [c for c in trials.columns if c not in known]


def _five(values: pd.Series) -> dict[str, float]:
    v = pd.to_numeric(values, errors="coerce").dropna().astype(float)
    if v.empty:
        return {"min": math.nan, "median": math.nan, "max": math.nan}
    return {"min": float(v.min()), "median": float(v.median()), "max": float(v.max())}


def _plain(value: Any) -> Any:
    """Make numpy and pandas scalars JSON-friendly (NaN and NA become None)."""
    if value is None or value is pd.NA:
        return None
    if isinstance(value, np.generic):
        value = value.item()
    if isinstance(value, float) and not math.isfinite(value):
        return None
    return value


def pilot_facts(
    trials: pd.DataFrame,
    sessions: pd.DataFrame,
    *,
    factors: Sequence[str] | None = None,
    rating_points: int = DEFAULT_RATING_POINTS,
) -> dict[str, Any]:
    """Facts a pilot should answer: how long sessions take and which levels are too easy or hard.

    Parameters
    ----------
    trials : pd.DataFrame
        Pooled trials table, already limited to the trials to judge (usually the main part).
    sessions : pd.DataFrame
        Per-session table: participant, session, started_wall, duration_s, n_trials, aborted,
        pilot.
    factors : sequence of str, optional
        Factors whose levels are checked for floor and ceiling; default: the trial table's own
        columns (see :func:`infer_factors`).
    rating_points : int, optional
        Number of points on the rating scale, default 9.

    Returns
    -------
    dict
        JSON-ready: ``n_sessions``, ``n_participants``, ``n_aborted``, ``n_pilot``,
        ``duration_s`` and ``trials_per_session`` (min, median, max), ``sessions`` (one dict per
        session), ``n_trials``, ``n_timed_out``, ``floor`` and ``ceiling`` (lists of
        ``{factor, level, share_correct, n_scored}``; floor is share correct < 5%, ceiling > 95%),
        ``floor_share``, ``ceiling_share`` and, when the table has ``sim_rt_ms``,
        ``sim_rt_error_ms`` (median and largest absolute difference between measured and intended
        response time of answered trials).
    """
    _require(sessions, SESSION_COLUMNS, "sessions")
    _require(trials, REQUIRED_FOR_SUMMARY, "trials")
    factors = infer_factors(trials) if factors is None else list(factors)
    session_rows = [
        {k: _plain(v) for k, v in row.items()}
        for row in sessions.sort_values(["participant", "session"]).to_dict(orient="records")
    ]
    pilot = sessions["pilot"].astype(bool) if "pilot" in sessions.columns else None
    facts: dict[str, Any] = {
        "n_sessions": len(sessions),
        "n_participants": int(sessions["participant"].astype(str).nunique()),
        "n_aborted": int(sessions["aborted"].astype(bool).sum()),
        "n_pilot": int(pilot.sum()) if pilot is not None else 0,
        "duration_s": _five(sessions["duration_s"]),
        "trials_per_session": _five(sessions["n_trials"]),
        "sessions": session_rows,
        "n_trials": len(trials),
        "n_timed_out": int(pd.to_numeric(trials.get("timed_out", 0), errors="coerce").sum())
        if "timed_out" in trials.columns
        else 0,
        "floor_share": FLOOR_SHARE,
        "ceiling_share": CEILING_SHARE,
        "floor": [],
        "ceiling": [],
    }
    for factor in factors:
        table = level_summary(trials, factor, rating_points=rating_points)
        for row in table.to_dict(orient="records"):
            share = row["share_correct"]
            if row["n_scored"] == 0 or not math.isfinite(share):
                continue
            entry = {
                "factor": factor,
                "level": _plain(row[factor]),
                "share_correct": float(share),
                "n_scored": int(row["n_scored"]),
            }
            if share < FLOOR_SHARE:
                facts["floor"].append(entry)
            elif share > CEILING_SHARE:
                facts["ceiling"].append(entry)
    if PILOT_COLUMN in trials.columns:
        answered = trials["outcome"].astype(str).isin(ANSWERED)
        diff = (
            pd.to_numeric(trials["rt_ms"], errors="coerce").astype(float)
            - pd.to_numeric(trials[PILOT_COLUMN], errors="coerce").astype(float)
        )[answered].dropna()
        facts["sim_rt_error_ms"] = {
            "n": int(diff.size),
            "median": float(diff.median()) if diff.size else None,
            "max_abs": float(diff.abs().max()) if diff.size else None,
        }
    return facts


# --------------------------------------------------------------------------------------------
# Files: CSV, PNG and the report
# --------------------------------------------------------------------------------------------


def _file_stem(factor: str) -> str:
    return _SAFE_NAME.sub("_", factor).strip("_") or "factor"


def _write_csv(table: pd.DataFrame, path: Path, written: list[Path], **kwargs: Any) -> None:
    # The table convention (runner.data.tables): empty cell for missing, numbers rounded by kind.
    write_table(table, path, index=bool(kwargs.get("index", True)))
    written.append(path)


def _write_text(path: Path, text: str, written: list[Path]) -> None:
    with replace_file(path) as fh:
        fh.write(text)
    written.append(path)


def write_summary(
    trials: pd.DataFrame,
    sessions: pd.DataFrame,
    out_dir: Path,
    *,
    factors: Sequence[str],
    rating_points: int = DEFAULT_RATING_POINTS,
    include_practice: bool = False,
    level_order: Mapping[str, Sequence[Any]] | None = None,
    title: str = "Pilot summary",
    force: bool = False,
    physio: PhysioTable | None = None,
    features: Sequence[str] | None = None,
    exclusions: pd.DataFrame | None = None,
    context: Mapping[str, Any] | None = None,
) -> list[Path]:
    """Write summary CSV tables, PNG plots and one self-contained ``report.html``.

    Files (in ``out_dir``, created if needed): ``levels_<factor>.csv`` per factor,
    ``participants.csv``, ``difficulty.csv`` (per stimulus), ``difficulty_loadings.csv`` (when a
    score could be computed), ``facts.json``, ``outcomes_<factor>.png``, ``rt_<factor>.png``,
    ``ratings_<factor>.png``, ``difficulty_<factor>.png`` (when a score could be computed) and
    ``report.html``, which embeds every plot as a data URI and needs no other file.

    The pilot report's models add (see :mod:`runner.data.summary_models`):
    ``difficulty_models.csv`` (every OLS model of the score on 1-3 stimulus features, ranked by
    AICc), ``difficulty_mixed.csv`` (the mixed model's coefficients, when fitted),
    ``load_bins.csv`` and ``load_twolines.csv`` (response time, accuracy and each physiological
    measure against the score) and ``load_<measure>.png``; ``facts.json`` gains ``difficulty``,
    ``drivers`` and ``load``.

    Parameters
    ----------
    trials : pd.DataFrame
        Pooled trials table (contract columns plus the trial table's own columns).
    sessions : pd.DataFrame
        Per-session table (participant, session, started_wall, duration_s, n_trials, aborted,
        pilot).
    out_dir : Path
        Folder to write into.
    factors : sequence of str
        Trial-table columns to summarise by, for example ``["nodes", "density"]``.
    rating_points : int, optional
        Number of points on the rating scale, default 9.
    include_practice : bool, optional
        Also summarise practice trials; default False (main part only, as the report says).
    level_order : mapping, optional
        Level order per factor, for example ``{"density": ["sparse", "medium", "dense"]}``.
    title : str, optional
        Heading of the report.
    exclusions : pd.DataFrame, optional
        The exclusions table (:func:`runner.data.exclusions.judge_sessions`), written as
        ``exclusions.csv``; ``trials`` and ``sessions`` already leave the excluded sessions out.
    context : mapping, optional
        Facts about the pooled sessions added to ``facts.json`` as they are (``studies``,
        ``pooling``, ``excluded``).
    force : bool, optional
        Write into an existing folder that is neither empty nor an earlier summary's (see
        :func:`runner.contract.outputs.prepare_output_folder`; a session folder, or a folder
        holding sessions, is refused even so). An earlier summary's files are removed first.

    Returns
    -------
    list of Path
        Every file written, in the order written; ``report.html`` is last.

    Raises
    ------
    InputFileError
        If a column is missing, no trials are left to summarise, or a value is out of range.
    OutputRefused
        The folder is not empty and not an earlier summary's (without ``force``), or is or holds
        a session folder.
    StorageError
        If ``out_dir`` cannot be written.
    """
    factors = list(factors)
    _require(trials, (*REQUIRED_FOR_SUMMARY, *factors), "trials")
    _require(sessions, SESSION_COLUMNS, "sessions")
    level_order = dict(level_order or {})
    n_practice = int((trials["part"].astype(str) != MAIN_PART).sum())
    data = trials if include_practice else trials[trials["part"].astype(str) == MAIN_PART]
    if data.empty:
        raise InputFileError(
            "The trials table has no main-part trials to summarise; check that the sessions ran "
            "past practice, or ask for practice to be included."
        )
    _check_outcomes(data)
    _ratings(data, rating_points)

    out_dir = Path(out_dir)
    target = prepare_output_folder(out_dir, SUMMARY_COMMAND, force=force, what="summary")

    written: list[Path] = []
    try:
        _write_all(
            data,
            sessions,
            out_dir,
            factors=factors,
            rating_points=rating_points,
            include_practice=include_practice,
            n_practice=n_practice,
            level_order=level_order,
            title=title,
            written=written,
            physio=physio,
            features=features,
            exclusions=exclusions,
            context=dict(context or {}),
        )
    except OSError as exc:
        raise StorageError(
            f"Cannot write the summary into {str(out_dir)!r} ({exc.strerror}); check the disk "
            "space and permissions of that folder."
        ) from exc
    finally:
        target.finish(written)
    return written


def _write_all(
    data: pd.DataFrame,
    sessions: pd.DataFrame,
    out_dir: Path,
    *,
    factors: list[str],
    rating_points: int,
    include_practice: bool,
    n_practice: int,
    level_order: dict[str, Sequence[Any]],
    title: str,
    written: list[Path],
    physio: PhysioTable | None = None,
    features: Sequence[str] | None = None,
    exclusions: pd.DataFrame | None = None,
    context: dict[str, Any] | None = None,
) -> list[Path]:
    from runner.data import summary_models

    if exclusions is not None:
        _write_csv(exclusions, out_dir / EXCLUSIONS_NAME, written, index=False)
    n_participants = int(data["participant"].astype(str).nunique())
    level_tables: dict[str, pd.DataFrame] = {}
    for factor in factors:
        table = level_summary(
            data, factor, rating_points=rating_points, levels=level_order.get(factor)
        )
        level_tables[factor] = table
        _write_csv(table, out_dir / f"levels_{_file_stem(factor)}.csv", written, index=False)

    people = participant_summary(data, rating_points=rating_points)
    _write_csv(people, out_dir / "participants.csv", written, index=False)

    models = summary_models.compute_models(data, factors=factors, physio=physio, features=features)
    difficulty = models.difficulty
    _write_csv(difficulty.scores, out_dir / "difficulty.csv", written)
    if difficulty.available:
        loadings = pd.DataFrame(
            {"loading": difficulty.loadings, "communality": difficulty.communalities}
        )
        loadings.index.name = "variable"
        _write_csv(loadings, out_dir / "difficulty_loadings.csv", written)

    facts = pilot_facts(data, sessions, factors=factors, rating_points=rating_points)
    facts["n_practice_excluded"] = 0 if include_practice else n_practice
    facts.update(summary_models.models_facts(models))
    for name, table in summary_models.model_tables(models).items():
        _write_csv(table, out_dir / name, written, index=False)
    facts.update(context or {})
    _write_text(
        out_dir / "facts.json",
        json.dumps(round_facts(facts), indent=2, sort_keys=True, default=_plain, allow_nan=False)
        + "\n",
        written,
    )

    figures: dict[str, list[Path]] = {}
    for factor in factors:
        table = level_tables[factor]
        stem = _file_stem(factor)
        paths = [
            plots.save_png(
                plots.outcome_bars(table, factor, n_participants=n_participants),
                out_dir / f"outcomes_{stem}.png",
            ),
            plots.save_png(
                plots.rt_means(table, factor, n_participants=n_participants),
                out_dir / f"rt_{stem}.png",
            ),
            plots.save_png(
                plots.rating_distribution(table, factor, rating_points=rating_points),
                out_dir / f"ratings_{stem}.png",
            ),
        ]
        if difficulty.available:
            paths.append(
                plots.save_png(
                    plots.difficulty_by_level(
                        difficulty.scores, factor, levels=list(table[factor])
                    ),
                    out_dir / f"difficulty_{stem}.png",
                )
            )
        figures[factor] = paths
        written.extend(paths)
    model_figures = summary_models.write_model_figures(models, out_dir, stem=_file_stem)
    written.extend(model_figures.values())

    html = build_report(
        data,
        title=title,
        facts=facts,
        level_tables=level_tables,
        people=people,
        difficulty=difficulty,
        figures=figures,
        include_practice=include_practice,
        n_practice=n_practice,
        rating_points=rating_points,
        models=models,
        model_figures=model_figures,
        exclusions=exclusions,
        level_order=level_order,
    )
    _write_text(out_dir / "report.html", html, written)
    return written
