"""`trialdeck check`: stimuli, expected counts, length, luminance, flashes and counterbalancing."""

from __future__ import annotations

import json
import math
from pathlib import Path

import numpy as np
import pytest
from PIL import Image
from protofix import BASE_ROWS, merged, write_image, write_protocol

from runner.cli import main
from runner.protocol.check import RATING_SHOW_CHOICE_S, check_protocol
from runner.protocol.latin import williams_rows


def _coded(report, code: str, severity: str | None = None) -> list:
    return [
        p
        for p in report.problems
        if p.code == code and (severity is None or p.severity == severity)
    ]


def _wcag(rgb: np.ndarray) -> np.ndarray:
    """Per-pixel WCAG 2.2 relative luminance, written out independently of runner.protocol."""
    c = rgb.astype(float) / 255
    lin = np.where(c <= 0.04045, c / 12.92, ((c + 0.055) / 1.055) ** 2.4)
    return lin @ np.array([0.2126, 0.7152, 0.0722])


def test_valid_protocol_has_no_errors_and_counts_trials(tmp_path: Path) -> None:
    """A valid protocol checks clean and reports trials per part and per block."""
    report = check_protocol(write_protocol(tmp_path))
    assert not report.has_errors, report.problems
    assert "5 trials per session (1 practice, 4 main)" in report.facts
    blocks = next(f for f in report.facts if f.startswith("trials per block"))
    assert "practice 1" in blocks and "sparse 2" in blocks and "dense 2" in blocks


def test_missing_protocol_file_is_one_error(tmp_path: Path, capsys) -> None:
    """A protocol path that does not exist is an error line, exit 1, no traceback."""
    code = main(["check", str(tmp_path / "nope.yaml")])
    text = "".join(capsys.readouterr())
    assert code == 1 and "nope.yaml" in text and "Traceback" not in text
    report = check_protocol(tmp_path / "nope.yaml")
    assert [p.code for p in report.problems] == ["missing-file"]


def test_upscaled_stimulus_is_a_warning(tmp_path: Path) -> None:
    """A 100 px wide image shown 300 px wide is enlarged 3 times, beyond max_upscale 1.5.

    Source: common practice (no published source); the factor is 300 / 100.
    """
    path = write_protocol(tmp_path, image_size=(100, 50))
    report = check_protocol(path)
    assert not report.has_errors
    hits = _coded(report, "upscaled-stimulus", "warning")
    assert len(hits) == 5 and all("3.00 times to 300x150 px" in p.message for p in hits)


def test_stimulus_held_below_requested_width_is_a_warning(tmp_path: Path) -> None:
    """A tall image limited by the 480 px screen height is shown 120 px wide, not 300.

    Source: common practice (no published source); 100x400 scaled by min(300/100, 480/400).
    """
    report = check_protocol(write_protocol(tmp_path, image_size=(100, 400)))
    hits = _coded(report, "shrunk-stimulus", "warning")
    assert hits and all("shown 120 px width, not the 300 px" in p.message for p in hits)


def test_missing_expected_count_is_a_warning_naming_the_row(tmp_path: Path) -> None:
    """A scored trial without an expected count is a warning at its table line."""
    rows = [list(r) for r in BASE_ROWS]
    rows[2][1] = ""
    report = check_protocol(write_protocol(tmp_path, rows=[tuple(r) for r in rows]))
    hits = _coded(report, "no-expected", "warning")
    assert len(hits) == 1 and hits[0].file.endswith("table.csv") and hits[0].line == 4


def test_stimulus_luminance_matches_wcag_check_value(tmp_path: Path) -> None:
    """A solid #777777 stimulus has mean relative luminance 0.184475.

    Source: WCAG 2.2 relative luminance; check value for #777777 (0.184475) computed from its formula.
    """
    report = check_protocol(write_protocol(tmp_path, colour=(0x77, 0x77, 0x77)))
    values = [v for k, v in report.luminance.items() if k.startswith("stimulus:")]
    assert len(values) == 5
    assert all(v == pytest.approx(0.184475, abs=1e-6) for v in values)


def test_stimulus_screen_luminance_matches_a_rendered_screen(tmp_path: Path) -> None:
    """The stimulus screen's mean (image, background, photodiode patch) equals a rendered one.

    Source: WCAG 2.2 relative luminance, averaged per pixel over a screen drawn with Pillow.
    """
    protocol = merged(
        screen={"resolution": [640, 480], "refresh_hz": 60, "background": "#202020"},
        photodiode={"corner": "top-right", "size_px": 40},
    )
    path = write_protocol(tmp_path, protocol, image_size=(200, 100), colour=(230, 200, 40))
    report = check_protocol(path)
    screen = Image.new("RGB", (640, 480), (0x20, 0x20, 0x20))
    stim = Image.new("RGB", (300, 150), (230, 200, 40))
    screen.paste(stim, (170, 165))
    screen.paste(Image.new("RGB", (40, 40), (255, 255, 255)), (600, 0))
    expected = float(_wcag(np.asarray(screen)).mean())
    assert report.luminance["stimulus screen (mean)"] == pytest.approx(expected, abs=1e-9)


def test_luminance_spread_beyond_tolerance_is_a_warning(tmp_path: Path) -> None:
    """Stimuli of #777777 and white differ by 0.815525 in luminance, beyond the tolerance 0.05.

    Source: WCAG 2.2 relative luminance check values (white 1.0, #777777 0.184475).
    """
    path = write_protocol(tmp_path, colour=(0x77, 0x77, 0x77))
    write_image(tmp_path / "img" / "e.png", (200, 100), (255, 255, 255))
    report = check_protocol(path)
    hits = _coded(report, "luminance-spread", "warning")
    assert len(hits) == 1 and hits[0].path == "checks.luminance_tolerance"
    assert "spreads 0.816" in hits[0].message


# Stimuli 240 px wide and full height: 'over' answers need room beside them for the answer box.
FLASHY = merged(
    screen={"resolution": [640, 480], "refresh_hz": 60, "background": "#000000"},
    stimulus_size={"width_px": 240},
    answer={"mode": "over", "max": 60},
    timing={"fixation_ms": [0, 0], "gap_ms": 0, "feedback_ms": 0},
    checks={"min_response_ms": 1},
    sequence=[{"trials": {"where": {"set": "main"}, "shuffle": False}}],
)


FLASHY_IMAGE = (240, 480)


def _flashy_rows() -> list[tuple[str, str, str, str]]:
    return [(f"img/f{i}.png", "3", "main", "sparse") for i in range(8)]


def test_fast_full_screen_flashing_breaks_the_three_flash_rule(tmp_path: Path, capsys) -> None:
    """White full-height stimuli on black every 14 frames make 5 flashes in one second: error.

    Source: WCAG 2.2 success criterion 2.3.1. By hand: each trial is fixation 1 frame,
    stimulus 1, offset 1, rating 1, chosen rating 9 (0.15 s), gap 1 = 14 frames at 60 Hz;
    onsets at frames 1, 15, 29, 43, 57 and offsets one frame later give 10 changes within
    frames 1-60 (one second), so 5 flashes.
    """
    path = write_protocol(
        tmp_path, FLASHY, rows=_flashy_rows(), image_size=FLASHY_IMAGE, colour=(255, 255, 255)
    )
    assert RATING_SHOW_CHOICE_S == pytest.approx(9 / 60)
    report = check_protocol(path)
    assert report.flash_reports["whole screen"].max_flashes == 5
    errors = [p for p in report.problems if p.severity == "error"]
    assert len(errors) == 2  # whole screen and stimulus area
    assert {p.code for p in errors} == {"flashing"}
    assert main(["check", str(path)]) == 1
    capsys.readouterr()


def test_pilot_refuses_what_check_refuses_and_creates_nothing(tmp_path: Path, capsys) -> None:
    """A protocol `check` refuses for flashing is refused by `pilot` too, before any folder or
    frame is made (issue 13, item 17: one rule for check and pilot)."""
    path = write_protocol(
        tmp_path / "study",
        FLASHY,
        rows=_flashy_rows(),
        image_size=FLASHY_IMAGE,
        colour=(255, 255, 255),
    )
    out, frames = tmp_path / "sessions", tmp_path / "frames"
    argv = ["pilot", str(path), "--participant", "P01", "--out", str(out), "--frames", str(frames)]
    assert main(argv) == 1
    err = capsys.readouterr().err
    assert ": error: " in err and "Traceback" not in err
    assert not out.exists() and not frames.exists()


def test_acknowledged_flashing_is_a_warning(tmp_path: Path) -> None:
    """With checks.acknowledge_flashes the same flashing is a warning and the check passes."""
    protocol = merged(**{k: v for k, v in FLASHY.items() if k != "checks"})
    protocol["checks"] = {"min_response_ms": 1, "acknowledge_flashes": True}
    path = write_protocol(
        tmp_path, protocol, rows=_flashy_rows(), image_size=FLASHY_IMAGE, colour=(255, 255, 255)
    )
    report = check_protocol(path)
    assert not report.has_errors
    acknowledged = _coded(report, "flashing", "warning")
    assert len(acknowledged) == 2 and acknowledged[0].path == "checks.acknowledge_flashes"


def test_slow_responses_keep_the_same_stimuli_within_the_rule(tmp_path: Path) -> None:
    """The same screens with min_response_ms 200 have at most 2 flashes in a second.

    Source: WCAG 2.2 success criterion 2.3.1. By hand: fixation 1 frame, stimulus 12,
    offset 1, rating 12, chosen 9, gap 1 = 36 frames (0.6 s) per trial: at most 2 onsets and
    2 offsets fall in one second.
    """
    protocol = merged(**{k: v for k, v in FLASHY.items() if k != "checks"})
    path = write_protocol(
        tmp_path, protocol, rows=_flashy_rows(), image_size=FLASHY_IMAGE, colour=(255, 255, 255)
    )
    report = check_protocol(path)
    assert report.flash_reports["whole screen"].max_flashes == 2
    assert not report.has_errors


def test_small_photodiode_patch_flashing_passes_as_small_area(tmp_path: Path) -> None:
    """A 20 px photodiode patch flashing fast is within the WCAG small-area limit: no error.

    Source: WCAG 2.2 notes to the flash thresholds (a quarter of 341 x 256 px at 1024 x 768).
    """
    protocol = merged(**{k: v for k, v in FLASHY.items() if k != "screen"})
    protocol["screen"] = {"resolution": [640, 480], "refresh_hz": 60, "background": "#808080"}
    protocol["photodiode"] = {"size_px": 20}
    path = write_protocol(
        tmp_path, protocol, rows=_flashy_rows(), image_size=FLASHY_IMAGE, colour=(128, 128, 128)
    )
    report = check_protocol(path)
    assert report.flash_reports["photodiode patch"].max_flashes >= 4
    assert not report.has_errors
    limit = 0.25 * 341 * 256 * (640 * 480) / (1024 * 768)
    assert any(f"({limit:.0f} px)" in f for f in report.facts)


def test_session_length_follows_the_protocol_durations(tmp_path: Path) -> None:
    """Shortest, typical and longest session length add up the protocol's own durations.

    Source: common practice (no published source); the sums are written out below.
    """
    protocol = merged(
        timing={
            "fixation_ms": [100, 200],
            "gap_ms": 100,
            "feedback_ms": 200,
            "stimulus_limit_s": 40,
            "answer_limit_s": 20,
            "rating_limit_s": 10,
        },
    )
    report = check_protocol(write_protocol(tmp_path, protocol))
    est = report.length
    tail = 0.15 + 0.1  # chosen rating + gap
    per_short = 0.1 + 3 * 0.2 + tail
    per_typical = 0.15 + 10 + 2 + 2 + tail
    per_long = 0.2 + 40 + 20 + 10 + tail
    pages_short, pages_typical = 2 * 0.2, 2 * 20
    assert est.shortest == pytest.approx(pages_short + 5 * per_short + 0.2)
    assert est.typical == pytest.approx(pages_typical + 5 * per_typical + 0.2)
    assert est.longest == pytest.approx(pages_typical + 5 * per_long + 0.2)


def test_no_time_limit_leaves_the_longest_unbounded(tmp_path: Path) -> None:
    """Without timing.rating_limit_s the longest session length has no upper bound."""
    report = check_protocol(write_protocol(tmp_path))
    assert report.length.longest is None
    assert report.length.longest_unbounded_by == ("timing.rating_limit_s",)


def test_long_stretch_without_break_is_a_warning(tmp_path: Path) -> None:
    """Four typical 14.5 s trials exceed a 0.5 minute limit; the warning suggests every_trials 2.

    Source: common practice (no published source); floor(30 / 14.5) = 2.
    """
    protocol = merged(checks={"max_minutes_without_break": 0.5})
    report = check_protocol(write_protocol(tmp_path, protocol))
    hits = _coded(report, "long-stretch", "warning")
    assert len(hits) == 1 and "every_trials: 2" in hits[0].message
    assert hits[0].path == "sequence[2]"


def test_breaks_every_minutes_shorten_the_stretch(tmp_path: Path) -> None:
    """With breaks.every_minutes 0.25 the longest stretch stays within the 0.5 minute limit."""
    protocol = merged(
        checks={"max_minutes_without_break": 0.5}, breaks={"every_minutes": 0.25, "min_s": 5}
    )
    report = check_protocol(write_protocol(tmp_path, protocol))
    assert not _coded(report, "long-stretch")
    assert report.length.max_stretch_s < 30


@pytest.mark.parametrize(
    ("levels", "participants", "balanced"),
    [(2, 4, True), (2, 5, False), (3, 6, True), (3, 3, False), (4, 8, True), (4, 6, False)],
)
def test_block_orders_used_equally_often(
    tmp_path: Path, levels: int, participants: int, balanced: bool
) -> None:
    """With N participants the check warns unless every Williams-square order is used equally.

    Source: Williams (1949): n rows for even n, 2n rows (the square and its reverse) for odd n.
    """
    names = [f"d{i}" for i in range(levels)]
    rows = [(f"img/{n}{k}.png", "3", "main", n) for n in names for k in range(2)]
    protocol = merged(sequence=[{"blocks": {"where": {"set": "main"}, "by": "density"}}])
    report = check_protocol(
        write_protocol(tmp_path, protocol, rows=rows), participants=participants
    )
    warned = _coded(report, "unbalanced-orders", "warning")
    assert bool(warned) != balanced
    n_rows = len(williams_rows(levels))
    assert n_rows == (levels if levels % 2 == 0 else 2 * levels)
    fact = next(f for f in report.facts if "block orders" in f)
    assert f"{min(participants, n_rows)} distinct" in fact
    if warned:
        assert f"plan {math.ceil(participants / n_rows) * n_rows}" in warned[0].message


def test_random_block_order_is_reported_as_unbalanced(tmp_path: Path) -> None:
    """Random block orders over 10 participants are not used equally often: a warning."""
    names = ["a", "b", "c"]
    rows = [(f"img/{n}.png", "3", "main", n) for n in names]
    protocol = merged(
        sequence=[
            {
                "blocks": {
                    "where": {"set": "main"},
                    "by": "density",
                    "order": "random",
                    "no_repeat": False,
                }
            }
        ]
    )
    report = check_protocol(write_protocol(tmp_path, protocol, rows=rows), participants=10)
    warned = _coded(report, "unbalanced-orders", "warning")
    assert len(warned) == 1 and warned[0].path == "sequence[0].blocks.order"


def test_json_output_lists_warnings_with_positions(tmp_path: Path, capsys) -> None:
    """`check --json` prints warnings as objects and exits 0 when there is no error."""
    path = write_protocol(tmp_path, image_size=(100, 50))
    code = main(["check", str(path), "--json"])
    found = json.loads(capsys.readouterr().out)["problems"]
    assert code == 0
    assert {f["severity"] for f in found} == {"warning"}
    keys = {"severity", "file", "line", "column", "path", "message", "code"}
    assert all(set(f) == keys for f in found)
    assert {f["code"] for f in found} == {"upscaled-stimulus"}
    assert all(f["line"] >= 2 for f in found if f["file"].endswith("table.csv"))


def test_fixation_screen_luminance_matches_the_painters_pixels(tmp_path: Path) -> None:
    """The fixation screen's luminance (cross, patch off) equals that of the screen the painter draws.

    Source: WCAG 2.2 relative luminance, averaged per pixel over the fixation screen drawn by
    runner.present.display under the SDL dummy driver (check and painter share one geometry).
    """
    from runner.present.display import display_for
    from runner.protocol.load import load_protocol
    from runner.session.views import FixationView

    protocol = merged(
        screen={"resolution": [640, 480], "refresh_hz": 60, "background": "#202020"},
        photodiode={"corner": "bottom-left", "size_px": 40},
    )
    path = write_protocol(tmp_path, protocol)
    report = check_protocol(path)
    display = display_for(load_protocol(path), fullscreen=False)
    try:
        display.draw(FixationView())
        rgb = np.frombuffer(display.pixels(), dtype=np.uint8).reshape(480, 640, 3)
    finally:
        display.close()
    assert (rgb[440:, :40] == 0).all() and rgb[240, 320].tolist() != [0x20] * 3
    assert report.luminance["fixation"] == pytest.approx(float(_wcag(rgb).mean()), abs=1e-9)
