"""Contrast ratio of two colours, as WCAG 2.1 defines it.

Web Content Accessibility Guidelines (WCAG) 2.1, W3C Recommendation, definitions of
"relative luminance" and "contrast ratio": each sRGB channel C (0–1) is linearised as
C/12.92 if C ≤ 0.03928, else ((C + 0.055)/1.055)^2.4; L = 0.2126 R + 0.7152 G +
0.0722 B; the ratio is (L1 + 0.05)/(L2 + 0.05) with L1 the lighter. Success criterion
1.4.3 (level AA) asks at least 4.5:1 for normal text. Pure, no Qt.
"""

from __future__ import annotations

__all__ = ["AA_NORMAL_TEXT", "contrast_ratio", "relative_luminance"]

#: WCAG 2.1 success criterion 1.4.3 (AA), normal text.
AA_NORMAL_TEXT = 4.5


def _channels(colour: str) -> tuple[float, float, float]:
    text = colour.strip().lstrip("#")
    if len(text) == 3:
        text = "".join(c * 2 for c in text)
    if len(text) != 6:
        raise ValueError(f"colour {colour!r}: give #rrggbb or #rgb")
    try:
        r, g, b = (int(text[i : i + 2], 16) / 255.0 for i in (0, 2, 4))
    except ValueError:
        raise ValueError(f"colour {colour!r}: not hexadecimal; give #rrggbb") from None
    return r, g, b


def relative_luminance(colour: str) -> float:
    """Relative luminance (0 black … 1 white) of an opaque "#rrggbb" colour."""

    def linear(c: float) -> float:
        return c / 12.92 if c <= 0.03928 else ((c + 0.055) / 1.055) ** 2.4

    r, g, b = (linear(c) for c in _channels(colour))
    return 0.2126 * r + 0.7152 * g + 0.0722 * b


def contrast_ratio(foreground: str, background: str) -> float:
    """Contrast ratio (1 … 21) of two opaque colours, in either order."""
    lighter, darker = sorted(
        (relative_luminance(foreground), relative_luminance(background)), reverse=True
    )
    return (lighter + 0.05) / (darker + 0.05)
