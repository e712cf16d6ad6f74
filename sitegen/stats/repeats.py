"""Rows grouped by their predictor setting, a chunk of rows at a time: what the test of lack of fit needs.

The test compares the residual sum of squares with pure error, the scatter of rows that share a setting
about their own mean. A file read in chunks never holds all its rows, so each chunk's settings are reduced to
their count, mean and sum of squared deviations and merged into the settings seen so far with the pairwise
update of Chan, Golub and LeVeque (1979): for parts i of one setting with counts nᵢ, means μᵢ and sums Mᵢ,
the whole has M = Σ Mᵢ + Σ nᵢ (μᵢ − μ)², free of the cancellation of Σy² − (Σy)²/n. Memory grows with the
number of distinct settings, not rows; past ``MAX_SETTINGS`` the accumulator gives up and says so (a file
with that many settings has few repeats, and the whole-file reader computes the test).
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import Any

import numpy as np
from numpy.typing import NDArray

FloatArray = NDArray[np.float64]
Keys = NDArray[Any]  # one key per setting: float64 (one predictor) or the row's bytes

#: Distinct settings a file read in chunks may have for the test to be computed (about 32 bytes each).
MAX_SETTINGS = 100_000


def setting_keys(settings: FloatArray) -> Keys:
    """One sortable key per row for its predictor values (n × k): the value itself for one predictor, else
    the row's bytes. −0.0 counts as 0.0, as it does when values are compared."""
    values = np.ascontiguousarray(settings, dtype=np.float64) + 0.0  # −0.0 + 0.0 is +0.0
    if values.ndim == 1:
        return values
    if values.shape[1] == 1:
        return values[:, 0]
    return values.view(np.dtype((np.void, 8 * values.shape[1])))[:, 0]


@dataclass(frozen=True, slots=True)
class PureError:
    """What the test of lack of fit needs from the rows grouped by setting."""

    settings: int  # distinct settings
    repeated: int  # settings with more than one row
    ss: float  # pure-error sum of squares: Σ over settings of Σ (y − the setting's mean)²


class Repeats:
    """Distinct settings with each one's row count, mean response and sum of squared deviations."""

    def __init__(self) -> None:
        self.keys: Keys | None = None
        self.count: NDArray[Any] = np.empty(0)
        self.mean: NDArray[Any] = np.empty(0)
        self.m2: NDArray[Any] = np.empty(0)
        self.overflow = False  # more than MAX_SETTINGS distinct settings: given up

    def add(self, settings: FloatArray, y: FloatArray) -> None:
        """Take one chunk's rows: their predictor values (n × k) and responses."""
        if self.overflow or len(y) == 0:
            return
        keys, inverse = np.unique(setting_keys(settings), return_inverse=True)
        inverse = np.ravel(inverse)
        count = np.bincount(inverse, minlength=len(keys)).astype(np.float64)
        mean = np.bincount(inverse, y, minlength=len(keys)) / count
        dev = y - mean[inverse]
        m2 = np.bincount(inverse, dev * dev, minlength=len(keys))
        if self.keys is not None:
            keys, count, mean, m2 = self._merged(self.keys, keys, count, mean, m2)
        self.keys, self.count, self.mean, self.m2 = keys, count, mean, m2
        if len(keys) > MAX_SETTINGS:
            self.overflow = True
            self.keys, self.count, self.mean, self.m2 = None, np.empty(0), np.empty(0), np.empty(0)

    def _merged(
        self, held: Keys, keys: Keys, count: NDArray[Any], mean: NDArray[Any], m2: NDArray[Any]
    ) -> tuple[Keys, NDArray[Any], NDArray[Any], NDArray[Any]]:
        """The settings held with a chunk's (each list has every key once, so a key has one or two parts)."""
        merged, inverse = np.unique(np.concatenate([held, keys]), return_inverse=True)
        inverse = np.ravel(inverse)
        parts_n = np.concatenate([self.count, count])
        total = np.bincount(inverse, parts_n, minlength=len(merged))
        parts_mean = np.concatenate([self.mean, mean])
        whole_mean = np.bincount(inverse, parts_n * parts_mean, minlength=len(merged)) / total
        shift = parts_mean - whole_mean[inverse]
        parts = np.concatenate([self.m2, m2]) + parts_n * shift * shift
        return merged, total, whole_mean, np.bincount(inverse, parts, minlength=len(merged))

    def pure_error(self) -> PureError | None:
        """The settings' pure error, or None when there were too many settings to keep."""
        if self.overflow:
            return None
        if self.keys is None:
            return PureError(0, 0, 0.0)
        return PureError(len(self.keys), int(np.sum(self.count > 1)), float(np.sum(self.m2)))

    def repeated_keys(self) -> Keys | None:
        """The sorted keys of the settings with more than one row, or None when there were too many to keep."""
        if self.overflow:
            return None
        if self.keys is None:
            return np.empty(0)
        return self.keys[self.count > 1]
