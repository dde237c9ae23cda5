"""The report's text pages in the PDF's standard fonts where their characters allow
(`ui.report.pdf`): Courier and Helvetica are among the 14 fonts every PDF reader has
(ISO 32000-1:2008, 9.6.2.2), so nothing is embedded and a long table is set quickly; a page
with a character they lack (Windows-1252 encoding) keeps an embedded TrueType font."""

from __future__ import annotations

from pathlib import Path

import matplotlib
import pytest

matplotlib.use("Agg")
import matplotlib.pyplot as plt
from matplotlib.backends.backend_pdf import PdfPages

from ui.report.pdf import _text_pages


@pytest.mark.parametrize(
    ("line", "core"),
    [("0.5010  40 ± 0.16 N — settled in 1.9 ms, k·x 2.0×", True), ("σ = 0.16 N", False)],
)
def test_a_text_page_uses_the_standard_fonts_when_it_can(
    tmp_path: Path, line: str, core: bool
) -> None:
    path = tmp_path / "page.pdf"
    with PdfPages(path) as pdf:
        _text_pages(pdf, plt, "Every load change", [line] * 100)
    data = path.read_bytes()
    assert data.count(b"/Type /Page\n") + data.count(b"/Type /Page ") >= 2  # 78 lines a page
    assert (b"/BaseFont /Courier" in data) is core
    assert (b"/FontFile" in data or b"/CharProcs" in data) is not core  # embedded glyphs
