"""Word-frequency laws and model sizing: the numbers the report draws and prints.

Zipf's law: the r-th most frequent word occurs about C · r^(-s) times (s near 1 for the words of
natural-language text).
Heaps' law: after N running tokens a text holds about K · N^β distinct types (β near 0.5 in
large collections). Both are fitted by least squares on log–log axes at log-spaced points, so
every decade weighs the same instead of the long tail of rare words or late tokens dominating.

Model sizing: a feed-forward n-gram model with an embedding table, one hidden layer and a
full softmax over the vocabulary; counts in parameters, float32 bytes and multiply-adds.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

FLOAT32_BYTES = 4


@dataclass(frozen=True)
class PowerFit:
    """y ≈ constant · x^exponent, fitted on the points x ≥ fit_from."""

    exponent: float
    constant: float
    fit_from: float

    def __call__(self, x: np.ndarray) -> np.ndarray:
        return self.constant * np.power(np.asarray(x, dtype=np.float64), self.exponent)


def log_points(total: int, count: int) -> np.ndarray:
    """Up to `count` distinct integers from 1 to `total`, evenly spaced on a log axis."""
    if total < 1:
        return np.zeros(0, dtype=np.int64)
    return np.unique(np.geomspace(1, total, num=max(count, 2)).round().astype(np.int64))


def fit_power(x: np.ndarray, y: np.ndarray, fit_from: float = 1.0) -> PowerFit:
    """Least-squares line through (log x, log y) over the points with x ≥ fit_from and y > 0."""
    x = np.asarray(x, dtype=np.float64)
    y = np.asarray(y, dtype=np.float64)
    used = (x >= fit_from) & (x > 0) & (y > 0)
    if np.count_nonzero(used) < 2:
        return PowerFit(float("nan"), float("nan"), fit_from)
    slope, intercept = np.polyfit(np.log(x[used]), np.log(y[used]), 1)
    return PowerFit(float(slope), float(np.exp(intercept)), fit_from)


def fit_zipf(counts: np.ndarray, points: int = 200) -> tuple[PowerFit, np.ndarray, np.ndarray]:
    """Zipf exponent s (reported positive) of descending counts; also the sampled ranks and counts.

    The fit uses log-spaced ranks over all types, so each decade of rank weighs the same.
    """
    ordered = np.sort(np.asarray(counts, dtype=np.int64)[np.asarray(counts) > 0])[::-1]
    ranks = log_points(len(ordered), points)
    sampled = ordered[ranks - 1] if len(ranks) else ordered[:0]
    fit = fit_power(ranks, sampled)
    return PowerFit(-fit.exponent, fit.constant, fit.fit_from), ranks, sampled


def fit_heaps(tokens: np.ndarray, types: np.ndarray, tail: float = 0.1) -> PowerFit:
    """Heaps' K and β, fitted on the last decade of the stream (N ≥ tail · total tokens).

    Early in a stream nearly every token is new, which bends the curve; the later part is the
    regime the law describes, so the fit leaves the start out.
    """
    tokens = np.asarray(tokens, dtype=np.float64)
    total = float(tokens.max()) if len(tokens) else 0.0
    return fit_power(tokens, types, fit_from=max(1.0, tail * total))


@dataclass(frozen=True)
class ModelSize:
    """Sizes of a feed-forward n-gram model with |V| ids, width m, context n-1 and hidden width h."""

    vocabulary: int
    width: int
    context: int
    hidden: int

    @property
    def embedding_parameters(self) -> int:
        """One m-wide row per id: |V| · m."""
        return self.vocabulary * self.width

    @property
    def input_values(self) -> int:
        """The concatenated context embeddings fed to the hidden layer: (n-1) · m values per example."""
        return self.context * self.width

    @property
    def hidden_parameters(self) -> int:
        """Weights and biases of the hidden layer: (n-1) · m · h + h."""
        return self.input_values * self.hidden + self.hidden

    @property
    def output_parameters(self) -> int:
        """Weights and biases of the output layer: h · |V| + |V|."""
        return self.hidden * self.vocabulary + self.vocabulary

    @property
    def parameters(self) -> int:
        return self.embedding_parameters + self.hidden_parameters + self.output_parameters

    @property
    def softmax_multiply_adds(self) -> int:
        """Scoring every id for one predicted token: h · |V| multiply-adds before the softmax."""
        return self.hidden * self.vocabulary

    @property
    def hidden_multiply_adds(self) -> int:
        return self.input_values * self.hidden

    def table(self) -> dict[str, int]:
        """Every figure by name, with float32 bytes beside parameter and value counts."""
        return {
            "embedding_parameters": self.embedding_parameters,
            "embedding_bytes": self.embedding_parameters * FLOAT32_BYTES,
            "input_values": self.input_values,
            "input_bytes": self.input_values * FLOAT32_BYTES,
            "hidden_parameters": self.hidden_parameters,
            "hidden_bytes": self.hidden_parameters * FLOAT32_BYTES,
            "output_parameters": self.output_parameters,
            "output_bytes": self.output_parameters * FLOAT32_BYTES,
            "parameters": self.parameters,
            "bytes": self.parameters * FLOAT32_BYTES,
            "hidden_multiply_adds": self.hidden_multiply_adds,
            "softmax_multiply_adds": self.softmax_multiply_adds,
        }
