"""The live dashboard: a PySide6 + pyqtgraph window over a `ui.session.LiveSession`.

Acquisition and estimation run in a worker process (`worker.py`); the window drains a
shared-memory buffer (`buffer.py`) on a timer and draws decimated min/max envelopes
(`envelope.py`), so redraw cost depends on the plot's width in pixels, not on the
number of samples in view. Only `window.py` imports Qt.
"""
