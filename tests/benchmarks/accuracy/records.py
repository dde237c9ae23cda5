"""Records: a cell, a load, a variant, the sampled readings and the true force.

Each cell-and-shape pair has its own seed (``SeedSequence(seed, spawn_key=(cell, shape))``)
for the load's parameters and the transducer noise; its three variants share that truth
and that noise, and each variant has its own seed for the rows it drops or spikes, so a
variant's score compares with the clean record's on the same noise.
"""

from __future__ import annotations

import time
from collections.abc import Sequence
from dataclasses import dataclass

import numpy as np

from accuracy.cells import CELLS, Cell
from accuracy.loads import SHAPES, Load, make_load
from accuracy.transducer import measure
from accuracy.truth import simulate
from accuracy.variants import VARIANTS, apply_variant

#: No spike is placed before this time (s): a spiked first reading would be a wrong start.
START_UP_S = 0.05
#: Samples before this time (s) are left out of every score. None since 2026-12-05: the
#: observer, like the yardsticks, starts with the cell at rest, and is scored from its
#: first row (it was 0.05 s, which hid start-up swings of tens of newtons on soft cells).
SCORED_FROM_S = 0.0


@dataclass(frozen=True)
class Record:
    """One benchmark record (invented data).

    Attributes:
        cell: the invented cell.
        load: the load history.
        variant: one of ``VARIANTS``.
        seed: ``"base:cell:shape:variant"``, the seed and spawn key of the record.
        t_s: sample times (s), shape (n,).
        z_m: readings (m), shape (n,).
        x_true_m: true displacement at ``t_s`` (m).
        force_true_n: true force at ``t_s`` (N).
    """

    cell: Cell
    load: Load
    variant: str
    seed: str
    t_s: np.ndarray
    z_m: np.ndarray
    x_true_m: np.ndarray
    force_true_n: np.ndarray

    @property
    def label(self) -> str:
        """``cell/shape/variant``."""
        return f"{self.cell.name}/{self.load.shape}/{self.variant}"

    @property
    def scored(self) -> np.ndarray:
        """Boolean mask of the samples that count in the scores (from `SCORED_FROM_S` on)."""
        return self.t_s >= SCORED_FROM_S


def wanted(only: Sequence[str], cell: str, shape: str) -> bool:
    """True when ``cell``/``shape`` matches one of the ``SHAPE/CELL`` filters (or there is none).

    A filter is ``SHAPE``, ``SHAPE/CELL`` or ``/CELL``; an empty part or ``*`` matches all.
    """
    if not only:
        return True
    for item in only:
        shape_part, _, cell_part = item.partition("/")
        if shape_part in ("", "*", shape) and cell_part in ("", "*", cell):
            return True
    return False


def build_records(
    seed: int,
    duration_s: float,
    only: Sequence[str] = (),
    cells: Sequence[Cell] = CELLS,
    variants: Sequence[str] = VARIANTS,
) -> tuple[list[Record], float]:
    """All records selected by ``only``; returns them and the seconds spent in the truth."""
    records: list[Record] = []
    truth_s = 0.0
    for ci, cell in enumerate(cells):
        for si, shape in enumerate(SHAPES):
            if not wanted(only, cell.name, shape):
                continue
            load_rng, noise_rng = (
                np.random.default_rng(s)
                for s in np.random.SeedSequence(seed, spawn_key=(ci, si)).spawn(2)
            )
            load = make_load(shape, cell.force_range_n, duration_s, load_rng)
            n = round(duration_s * cell.sample_rate_hz)
            t = np.arange(n) * cell.dt_s
            start = time.perf_counter()
            x = simulate(cell, load, t)
            truth_s += time.perf_counter() - start
            z = measure(cell, x, noise_rng)
            f = np.asarray(load.force(t), dtype=float)
            first = int(np.searchsorted(t, START_UP_S))
            for vi, variant in enumerate(VARIANTS):
                if variant not in variants:
                    continue
                rng = np.random.default_rng(np.random.SeedSequence(seed, spawn_key=(ci, si, vi)))
                kept, tv, zv = apply_variant(variant, cell, t, z, rng, first)
                records.append(
                    Record(cell, load, variant, f"{seed}:{ci}:{si}:{vi}", tv, zv, x[kept], f[kept])
                )
    return records, truth_s
