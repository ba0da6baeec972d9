"""Statistics of per-realization samples."""

from __future__ import annotations

import math
from dataclasses import dataclass
from typing import Any

import numpy as np


def stderr(samples, axis: int = 0) -> Any:
    """Standard error of the mean along ``axis``: unbiased (n - 1) std over sqrt(n), NaN for n < 2.

    A float for a 1-D sample, an array of the remaining axes otherwise (hence ``Any`` for mypy).

    The one estimator of mottle's error bars (``Stat``, spectra, ``target_stderr``, fits).
    """
    values = np.asarray(samples, dtype=float)
    count = values.shape[axis] if values.ndim else 0
    if count < 2:
        shape = np.delete(np.array(values.shape), axis) if values.ndim else ()
        return math.nan if len(shape) == 0 else np.full(tuple(shape), math.nan)
    result = np.std(values, axis=axis, ddof=1) / math.sqrt(count)
    return float(result) if np.ndim(result) == 0 else result


def stderr_from_sums(total, total_squared, count: int) -> tuple[np.ndarray, np.ndarray]:
    """Mean and standard error from the running sums of ``x`` and ``x**2`` over ``count`` samples
    (the form the core's streaming profiles arrive in); the same estimator as :func:`stderr`."""
    mean = total / count
    if count < 2:
        return mean, np.full_like(mean, np.nan)
    variance = np.maximum(total_squared / count - mean**2, 0.0) * count / (count - 1)
    return mean, np.sqrt(variance / count)


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
        error = stderr(values)
        std = error * math.sqrt(count)
        if np.all(values > 0.0):
            logs = np.log(values)
            log_mean, log_stderr = float(np.mean(logs)), stderr(logs)
        else:
            log_mean = log_stderr = math.nan
        return cls(mean, error, std, count, log_mean, log_stderr)

    def __str__(self) -> str:
        return f"{self.mean:.6g} ± {self.stderr:.2g} (n={self.count})"
