"""Distributions for Monte Carlo what-ifs, drawn from numpy's Generator so a seed reproduces
every draw, whatever the chunk size (each input has its own stream, consumed in order)."""

import zlib
from dataclasses import dataclass
from typing import Literal

import numpy as np

from service.domain.arrays import Floats

Kind = Literal["uniform", "triangular", "normal", "lognormal", "choice"]


@dataclass(frozen=True)
class Distribution:
    """`uniform` (low, high); `triangular` (low, mode, high); `normal` (mean, sd, and optional
    bounds low/high: values outside are clipped to them); `lognormal` (mean and sigma of the
    log: the median is e^mean); `choice` (values, optional weights)."""

    kind: Kind
    low: float | None = None
    high: float | None = None
    mode: float = 0.0
    mean: float = 0.0
    sd: float = 1.0
    sigma: float = 1.0
    values: tuple[float, ...] = ()
    weights: tuple[float, ...] | None = None

    @property
    def _low(self) -> float:
        return -np.inf if self.low is None else self.low

    @property
    def _high(self) -> float:
        return np.inf if self.high is None else self.high

    def draw(self, generator: np.random.Generator, size: int) -> Floats:
        if self.kind == "uniform":
            return generator.uniform(self._low, self._high, size)
        if self.kind == "triangular":
            return generator.triangular(self._low, self.mode, self._high, size)
        if self.kind == "normal":
            return np.clip(generator.normal(self.mean, self.sd, size), self._low, self._high)
        if self.kind == "lognormal":
            return generator.lognormal(self.mean, self.sigma, size)
        weights = None if self.weights is None else np.asarray(self.weights) / np.sum(self.weights)
        return np.asarray(generator.choice(np.asarray(self.values, dtype=np.float64), size=size, p=weights))

    def centre(self) -> float:
        """The median, where tornado swings start when the base request gives no value."""
        a, b = self._low, self._high
        if self.kind == "uniform":
            return (a + b) / 2.0
        if self.kind == "triangular":
            c = self.mode
            if c >= (a + b) / 2.0:
                return float(a + np.sqrt((b - a) * (c - a) / 2.0))
            return float(b - np.sqrt((b - a) * (b - c) / 2.0))
        if self.kind == "normal":
            return float(np.clip(self.mean, a, b))
        if self.kind == "lognormal":
            return float(np.exp(self.mean))
        if self.weights is None:
            return float(np.median(self.values))
        order = np.argsort(self.values)  # the weighted median: where the cumulative weight reaches 1/2
        cumulative = np.cumsum(np.asarray(self.weights)[order]) / np.sum(self.weights)
        return float(np.asarray(self.values)[order][np.searchsorted(cumulative, 0.5)])


def stream(seed: int, name: str) -> np.random.Generator:
    """The generator of one varied input: independent of the others and keyed by the input's name,
    so the draws do not depend on the order in which the inputs are listed."""
    return np.random.default_rng(np.random.SeedSequence(seed, spawn_key=(zlib.crc32(name.encode("utf-8")),)))
