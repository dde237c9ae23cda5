"""Text contrast of the dashboard, by the WCAG 2.1 formula.

Source: Web Content Accessibility Guidelines (WCAG) 2.1, W3C Recommendation, the
definitions of "relative luminance" and "contrast ratio", and success criterion 1.4.3
Contrast (Minimum), level AA: at least 4.5:1 for normal text.
"""

from __future__ import annotations

import pytest

from ui.contrast import AA_NORMAL_TEXT, contrast_ratio, relative_luminance
from ui.dashboard import palette


def test_the_formula_gives_the_values_of_its_definition() -> None:
    # WCAG 2.1: relative luminance is "normalized to 0 for darkest black and 1 for
    # lightest white", and contrast ratios "can range from 1 to 21".
    assert relative_luminance("#000000") == 0.0
    assert relative_luminance("#ffffff") == pytest.approx(1.0, abs=1e-12)
    assert contrast_ratio("#000000", "#ffffff") == pytest.approx(21.0)
    assert contrast_ratio("#ffffff", "#000000") == pytest.approx(21.0)
    assert contrast_ratio("#37474f", "#37474f") == pytest.approx(1.0)
    # Mid grey #808080 by hand from the definition: C = 128/255 = 0.50196;
    # ((C + 0.055)/1.055)^2.4 = 0.21586, the same in each channel, weights sum to 1.
    assert relative_luminance("#808080") == pytest.approx(0.21586, abs=5e-5)
    # A pure primary gives its channel's weight: L(#00ff00) = 0.7152.
    assert relative_luminance("#00ff00") == pytest.approx(0.7152)


def test_the_aa_threshold_separates_two_close_greys() -> None:
    # Commonly cited (value from memory): #767676 on white is the lightest grey that
    # meets 4.5:1 (4.54:1); #777777 just fails it (4.48:1).
    assert contrast_ratio("#767676", "#ffffff") == pytest.approx(4.54, abs=0.005)
    assert contrast_ratio("#777777", "#ffffff") == pytest.approx(4.48, abs=0.005)
    assert (
        contrast_ratio("#767676", "#ffffff")
        >= AA_NORMAL_TEXT
        > contrast_ratio("#777777", "#ffffff")
    )


@pytest.mark.parametrize(("what", "text", "background"), palette.TEXT_ON_BACKGROUND)
def test_every_text_colour_of_the_window_meets_aa(what: str, text: str, background: str) -> None:
    assert contrast_ratio(text, background) >= AA_NORMAL_TEXT, what


def test_the_old_grey_tile_and_acknowledged_grey_would_have_failed() -> None:
    # The colours this replaced (white on #78909c, #90a4ae on white) fall short: the
    # test above can fail.
    assert contrast_ratio("#ffffff", "#78909c") < AA_NORMAL_TEXT
    assert contrast_ratio("#90a4ae", "#ffffff") < AA_NORMAL_TEXT


def test_a_malformed_colour_is_refused() -> None:
    with pytest.raises(ValueError, match="#rrggbb"):
        relative_luminance("teal")
