"""Statistics of per-realization samples."""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np


@dataclass(frozen=True)
class Stat:
    """Mean, spread and typical value of a sample.

    ``std`` uses the unbiased (n - 1) estimator and ``stderr = std / sqrt(count)``.
    For a positive quantity ``log_mean = <ln X>`` with its standard error
    ``log_stderr``, so that the typical value is ``exp(log_mean)`` (``typical``);
    where a sample is <= 0 they are NaN.
    """

    mean: float
    stderr: float
    std: float
    count: int
    log_mean: float
    log_stderr: float

    @property
    def typical(self) -> float:
        """``exp(<ln X>)``; for the transmission this is the typical transmission."""
        return math.exp(self.log_mean) if math.isfinite(self.log_mean) else math.nan

    @property
    def log_std(self) -> float:
        return self.log_stderr * math.sqrt(self.count) if self.count > 0 else math.nan

    @classmethod
    def of(cls, samples) -> Stat:
        values = np.asarray(samples, dtype=float)
        count = int(values.size)
        if count == 0:
            return cls(math.nan, math.nan, math.nan, 0, math.nan, math.nan)
        mean = float(np.mean(values))
        std = float(np.std(values, ddof=1)) if count > 1 else math.nan
        stderr = std / math.sqrt(count) if count > 1 else math.nan
        if np.all(values > 0.0):
            logs = np.log(values)
            log_mean = float(np.mean(logs))
            log_stderr = float(np.std(logs, ddof=1)) / math.sqrt(count) if count > 1 else math.nan
        else:
            log_mean = log_stderr = math.nan
        return cls(mean, stderr, std, count, log_mean, log_stderr)

    def __str__(self) -> str:
        return f"{self.mean:.6g} ± {self.stderr:.2g} (n={self.count})"
