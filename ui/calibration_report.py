"""The calibration summary as a self-contained HTML page with fit and residual plots."""

from __future__ import annotations

import base64
import html
from pathlib import Path
from typing import Any

import numpy as np

from ui.outputs import replacing, write_text_atomic

__all__ = ["write_calibration_report"]

_POINTS = (0, 110, 120)
_FIT = (215, 140, 0)


def _plots(result: Any, out: Path) -> tuple[Path, Path]:
    """fit.png (deflection against force, with the fitted curve) and residuals.png."""
    from ui.plots import _qt_app

    app = _qt_app()
    import pyqtgraph as pg

    pg.setConfigOptions(antialias=True, background="w", foreground=(30, 30, 30))
    fit = result.fit
    f = np.asarray(fit.force_n)
    x = np.asarray(fit.deflection_m)
    grid = np.linspace(0.0, float(f.max()), 200)
    paths = []
    for name, build in (("fit.png", "fit"), ("residuals.png", "residuals")):
        win = pg.GraphicsLayoutWidget()
        win.resize(900, 500)
        plot = win.addPlot()
        plot.showGrid(x=True, y=True, alpha=0.3)
        plot.setLabel("bottom", "force", units="N")
        symbol = {"symbol": "o", "symbolSize": 7, "symbolBrush": _POINTS, "pen": None}
        if build == "fit":
            plot.setTitle("deflection against force, increasing loads, with the fitted curve")
            plot.setLabel("left", "deflection", units="m")
            plot.plot(grid, fit.deflection_at(grid), pen=pg.mkPen(_FIT, width=2))
            plot.plot(f, x, **symbol)
        else:
            plot.setTitle("residuals of the fit (deflection − fitted), in force units")
            plot.setLabel("left", "residual", units="N")
            plot.addLine(y=0.0, pen=pg.mkPen((150, 150, 150)))
            plot.plot(f, np.asarray(fit.residuals_n), **symbol)
        win.show()
        app.processEvents()
        path = out / name
        with replacing(path) as tmp:
            if not win.grab().save(str(tmp), "PNG"):
                raise OSError(f"{path}: could not write the PNG")
        win.close()
        paths.append(path)
    return paths[0], paths[1]


def write_calibration_report(result: Any, text: str, out: Path) -> Path:
    """Write out/summary.html (plots embedded) and the two PNGs; returns the HTML path."""
    fit_png, res_png = _plots(result, out)
    images = "".join(
        f'<figure><img alt="{html.escape(p.stem)}" src="data:image/png;base64,'
        f'{base64.b64encode(p.read_bytes()).decode("ascii")}"></figure>'
        for p in (fit_png, res_png)
    )
    # the text's first line is its heading: shown once, as the page's heading
    heading, _, body = text.partition("\n")
    page = (
        "<!DOCTYPE html><html lang='en'><head><meta charset='utf-8'>"
        f"<title>{html.escape(heading)}</title>"
        "<style>body{font-family:sans-serif;max-width:960px;margin:2em auto;color:#222}"
        "pre{background:#f4f6f7;padding:1em;overflow-x:auto}img{max-width:100%}</style>"
        f"</head><body><h1>{html.escape(heading)}</h1>"
        f"<pre>{html.escape(body)}</pre>{images}"
        "<p>Uncertainties are standard uncertainties (k = 1) unless stated. ISO 376 class "
        "limits and ASTM E74 factors are quoted from memory; for legal or safety-critical "
        "use rely on an accredited calibration.</p></body></html>\n"
    )
    path = out / "summary.html"
    return write_text_atomic(path, page)
