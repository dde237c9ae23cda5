"""The live dashboard: a PySide6 + pyqtgraph window over a `ui.session.LiveSession`.

Acquisition and estimation run on a worker thread (`worker.py`); the window drains a
shared buffer (`buffer.py`) on a timer and draws decimated min/max envelopes
(`envelope.py`), so redraw cost depends on the plot's width in pixels, not on the
number of samples in view. Only `window.py` imports Qt.
"""
