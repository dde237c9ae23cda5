"""Sum, maximum and minimum over each sample's hold window (compiled with numba).

Sample ``i`` of a block has the window of the ``h + 1`` values ending at it, less those
before its anchor (the sample at which the window last started again). Each window is
reduced on its own, in index order, so the results do not depend on how the stream is cut
into blocks. The settling monitor calls this for every block; at 50 kHz with a 20 ms hold
the windows hold 1001 values, where NumPy's masked reductions cost about 10 µs a sample.
"""

from __future__ import annotations

import numba
import numpy as np

__all__ = ["window_stats"]


@numba.njit(cache=True, nogil=True)
def window_stats(
    ext_f: np.ndarray,  # (h + n,) the last h values of the previous block, then this one
    ext_pos: np.ndarray,  # (h + n,) their stream positions
    anchor: np.ndarray,  # (n,) first stream position each sample's window may use
    h: int,  # window length less one
    total: np.ndarray,  # (n,) out: sum over the window
    high: np.ndarray,  # (n,) out: maximum (−inf when empty)
    low: np.ndarray,  # (n,) out: minimum (+inf when empty)
) -> None:
    n = anchor.shape[0]
    for i in range(n):
        s = 0.0
        hi = -np.inf
        lo = np.inf
        a = anchor[i]
        for j in range(i, i + h + 1):
            if ext_pos[j] >= a:
                v = ext_f[j]
                s += v
                if v > hi:
                    hi = v
                if v < lo:
                    lo = v
        total[i] = s
        high[i] = hi
        low[i] = lo
