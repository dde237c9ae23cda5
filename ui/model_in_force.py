"""The model in force: which of the observer's force models explains the data, in words.

Each estimate row carries the probabilities of the observer's three model families
(`estimator.observer.ESTIMATE_DTYPE`: ``p_hold``, ``p_rate``, ``p_jump``; they sum to 1
up to the models left out of the reported mixture). The operator reads them as what
the load is doing, in our own words:

| family | words | the observer's prior |
|---|---|---|
| hold | steady load | a constant force |
| rate | moving load | a force whose rate wanders (ramps, slow sines) |
| jump | sudden change | a step of the force or of its rate |

The family with more than half of the probability is the model in force; when none has,
the data do not decide between them and the words say so. Pure, no Qt.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

__all__ = ["FAMILY_WORDS", "ModelInForce", "model_in_force"]

#: Our words for each family, in the order of the estimate's fields.
FAMILY_WORDS: tuple[tuple[str, str], ...] = (
    ("hold", "steady load"),
    ("rate", "moving load"),
    ("jump", "sudden change"),
)


@dataclass(frozen=True)
class ModelInForce:
    """The observer's model probabilities at one estimate.

    Attributes:
        shares: probabilities of (hold, rate, jump), each in [0, 1] or NaN if unknown.
    """

    shares: tuple[float, float, float]

    @property
    def known(self) -> bool:
        """True when the probabilities are numbers (a row was received)."""
        return all(math.isfinite(p) for p in self.shares)

    @property
    def family(self) -> str:
        """ "hold", "rate" or "jump" when one family holds more than half; else ""."""
        if not self.known:
            return ""
        best = max(range(3), key=lambda i: self.shares[i])
        return FAMILY_WORDS[best][0] if self.shares[best] > 0.5 else ""

    def headline(self) -> str:
        """What explains the data now: "steady load (98 %)", or "undecided"."""
        if not self.known:
            return "—"
        family = self.family
        if not family:
            return "undecided"
        i = [f for f, _ in FAMILY_WORDS].index(family)
        return f"{FAMILY_WORDS[i][1]} ({_percent(self.shares[i])})"

    def detail(self) -> str:
        """Every family's share: "steady 98 % · moving 2 % · sudden 0 %"."""
        if not self.known:
            return ""
        return " · ".join(
            f"{words.split()[0]} {_percent(p)}"
            for (_, words), p in zip(FAMILY_WORDS, self.shares, strict=True)
        )


def _percent(p: float) -> str:
    return f"{100.0 * p:.0f} %"


def model_in_force(p_hold: float, p_rate: float, p_jump: float) -> ModelInForce:
    """The model in force from one estimate's ``p_hold``, ``p_rate``, ``p_jump``."""
    return ModelInForce((float(p_hold), float(p_rate), float(p_jump)))
