"""Reject reasons show their comparison truthfully (the numbers printed must compare as the rule did)."""

from __future__ import annotations

import pytest

from render.reasons import below_text, box_reason, contrast_reason, visible_fraction_reason


@pytest.mark.parametrize(
    ("value", "limit", "text"),
    [
        (0.2, 0.25, "0.20"),
        (0.2496, 0.25, "0.2496"),  # two decimals would read "0.25 < 0.25"
        (0.249999, 0.25, "0.249999"),
        (1.999, 2.0, "1.999"),
    ],
)
def test_below_text_keeps_the_digits_that_make_the_comparison_true(value, limit, text):
    assert below_text(value, limit) == text
    assert float(below_text(value, limit)) < limit


def test_below_text_falls_back_to_the_full_value():
    value = 0.25 - 1e-9
    assert float(below_text(value, 0.25)) == value


def test_reasons_read_true_and_pass_at_the_limit():
    assert visible_fraction_reason(0.2496, min_visible_fraction=0.25) == "visible_fraction 0.2496 < 0.25"
    assert visible_fraction_reason(0.25, min_visible_fraction=0.25) is None
    assert box_reason(4.0, min_box_px=16) == "box 4 px < 16 px"
    assert box_reason(15.9999996, min_box_px=16) == "box 15.9999996 px < 16 px"  # "%g" alone reads "16 < 16"
    assert box_reason(16.0, min_box_px=16) is None
    label = {"mask_area_px": 10, "contrast": 2.996}
    assert contrast_reason(label, min_contrast=3.0) == "contrast 2.996 < 3"
    assert contrast_reason({**label, "mask_area_px": 0}, min_contrast=3.0) is None  # judged as "not visible"
    assert contrast_reason({"mask_area_px": 10}, min_contrast=3.0) is None  # frames from before the measure


def test_planner_and_labels_use_the_same_wording():
    from campaigns.planner import accept_instance

    label = {"bbox": [0, 0, 15.9999996, 40], "mask_area_px": 100, "visible_fraction": 0.2496, "contrast": 2.996}
    ok, reasons = accept_instance(label, min_visible_fraction=0.25, min_box_px=16, min_contrast=3.0)
    assert not ok and reasons == [
        visible_fraction_reason(0.2496, min_visible_fraction=0.25),
        box_reason(15.9999996, min_box_px=16),
        contrast_reason(label, min_contrast=3.0),
    ]
