"""Percentile bootstrap intervals for the mean over seeds, vectorised across all measured columns."""

from __future__ import annotations

import zlib

import numpy as np

__all__ = ["keyed_rng", "mean_and_interval", "percentile_interval"]


def keyed_rng(seed: int, *labels: str) -> np.random.Generator:
    """Build a generator from a seed and text labels, so each group's resampling is reproducible on its own.

    The labels are hashed with CRC-32 (stable across runs), so adding or removing other groups never shifts
    the random stream of this one.
    """
    key = zlib.crc32("\x1f".join(labels).encode("utf-8"))
    return np.random.default_rng([int(seed), key])


def _check_samples(samples: np.ndarray) -> np.ndarray:
    """Return the samples as a float array after checking there is at least one seed and no NaN."""
    data = np.asarray(samples, dtype=float)
    if data.ndim == 0 or data.shape[0] == 0:
        raise ValueError("bootstrap needs at least one sample along axis 0")
    if np.isnan(data).any():
        raise ValueError("bootstrap samples must not contain NaN")
    return data


def _resample_counts(n_samples: int, n_resamples: int, rng: np.random.Generator) -> np.ndarray:
    """Draw seed indices once as (n_resamples, n_samples) and count how often each seed is picked per row."""
    picks = rng.integers(0, n_samples, size=(n_resamples, n_samples))
    flat = picks + n_samples * np.arange(n_resamples)[:, None]
    return np.bincount(flat.ravel(), minlength=n_resamples * n_samples).reshape(n_resamples, n_samples)


def percentile_interval(
    samples: np.ndarray,
    *,
    confidence: float = 0.95,
    n_resamples: int = 2000,
    rng: np.random.Generator,
) -> tuple[np.ndarray, np.ndarray]:
    """Percentile bootstrap interval of the mean along axis 0: shape (n_seeds, ...) gives low, high of (...).

    The same resampled seed indices are applied to every column, which keeps columns paired. Input must be
    NaN-free (a ValueError is raised otherwise); with a single sample the interval is that sample itself.
    """
    if not 0.0 < confidence < 1.0:
        raise ValueError(f"confidence must lie strictly between 0 and 1, got {confidence}")
    if n_resamples < 1:
        raise ValueError(f"n_resamples must be at least 1, got {n_resamples}")
    data = _check_samples(samples)
    n_samples = data.shape[0]
    if n_samples == 1:
        return np.array(data[0]), np.array(data[0])
    columns = data.reshape(n_samples, -1)
    counts = _resample_counts(n_samples, n_resamples, rng)
    resampled_means = counts @ columns / n_samples
    alpha = 1.0 - confidence
    low, high = np.quantile(resampled_means, [alpha / 2.0, 1.0 - alpha / 2.0], axis=0)
    constant = np.ptp(columns, axis=0) == 0.0
    low = np.where(constant, columns[0], low)
    high = np.where(constant, columns[0], high)
    return low.reshape(data.shape[1:]), high.reshape(data.shape[1:])


def mean_and_interval(
    samples: np.ndarray,
    *,
    confidence: float = 0.95,
    n_resamples: int = 2000,
    rng: np.random.Generator,
) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Sample mean along axis 0 with its percentile bootstrap interval, as (mean, low, high).

    Identical samples give exactly their common value for all three; otherwise the bounds are widened by
    at most rounding error so that low <= mean <= high always holds.
    """
    data = _check_samples(samples)
    mean = np.where(np.ptp(data, axis=0) == 0.0, data[0], data.mean(axis=0))
    low, high = percentile_interval(data, confidence=confidence, n_resamples=n_resamples, rng=rng)
    return np.asarray(mean), np.asarray(np.minimum(low, mean)), np.asarray(np.maximum(high, mean))
