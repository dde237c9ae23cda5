"""The compiled pass of the CSV writer (`daq.csv_dialect.rows_text`): an orjson dump of a
2-D float array, ``[[a,b],[c,d]]``, rewritten as dialect rows ``a,b\\nc,d\\n``.

One pass over the bytes: the brackets go, each row ends in ``\\n``, and a field of an
integer column loses the ``.0`` orjson writes after an integral float. Compiled with
numba on first use (cached beside this file).
"""

from __future__ import annotations

import numba
import numpy as np

__all__ = ["dump_to_rows"]

_OPEN, _CLOSE, _COMMA, _NL, _DOT, _ZERO = 91, 93, 44, 10, 46, 48


@numba.njit(cache=True, nogil=True)
def dump_to_rows(dump: np.ndarray, whole: np.ndarray, out: np.ndarray) -> int:
    """Rewrite ``dump`` (the bytes of ``[[...],[...]]``) into ``out`` (as long); returns
    the length written, or -1 when a field of an integer column (``whole[k]``) does not
    end in ``.0``."""
    o = 0
    field = 0
    i = 1  # inside the outer brackets
    stop = dump.shape[0] - 1
    while i < stop:
        c = dump[i]
        if c == _OPEN:
            field = 0
        elif c in (_CLOSE, _COMMA):
            if whole[field]:
                if o < 2 or out[o - 2] != _DOT or out[o - 1] != _ZERO:
                    return -1
                o -= 2
            if c == _CLOSE:
                out[o] = _NL
                i += 1  # the comma between two rows
            else:
                out[o] = _COMMA
                field += 1
            o += 1
        else:
            out[o] = c
            o += 1
        i += 1
    return o
