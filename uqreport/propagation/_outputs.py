"""What the linear and Monte Carlo results share: lookup of outputs by name, correlations."""

from __future__ import annotations

import numpy as np
from numpy.typing import NDArray

__all__ = ["OutputsMixin"]


class OutputsMixin:
    """For result dataclasses with ``outputs``, ``u`` and ``covariance`` attributes."""

    outputs: tuple
    u: NDArray[np.float64]
    covariance: NDArray[np.float64]

    @property
    def output_names(self) -> tuple[str, ...]:
        return tuple(o.name for o in self.outputs)

    @property
    def correlation(self) -> NDArray[np.float64]:
        """Output correlation matrix r(y_i, y_j) (1 on the diagonal, 0 where u = 0)."""
        d = np.where(self.u > 0, self.u, 1.0)
        r = self.covariance / np.outer(d, d)
        np.fill_diagonal(r, 1.0)
        return r

    def index(self, name: str) -> int:
        """Column of the output called ``name``."""
        try:
            return self.output_names.index(name)
        except ValueError:
            raise KeyError(f"no output named '{name}'") from None
