"""Shared fixtures.  Matplotlib is forced to the Agg backend before anything imports it."""

from __future__ import annotations

import os

os.environ.setdefault("MPLBACKEND", "Agg")

import numpy as np
import pytest

from uqreport.inputs import InputQuantity, InputSet

# GUM (JCGM 100:2008) Annex H.2, Table H.2: five simultaneous sets of V / V, I / mA, phi / rad.
GUM_H2_OBSERVATIONS = np.array(
    [
        [5.007, 19.663, 1.0456],
        [4.994, 19.639, 1.0438],
        [5.005, 19.640, 1.0468],
        [4.990, 19.685, 1.0428],
        [4.999, 19.678, 1.0433],
    ]
)


@pytest.fixture
def gum_h2_inputs() -> InputSet:
    """V, I (in A), phi from GUM H.2's observations: means, u = s/sqrt(5), nu = 4, and the
    correlation coefficients of the means (GUM H.2.3, equation (H.9))."""
    obs = GUM_H2_OBSERVATIONS.copy()
    obs[:, 1] *= 1e-3  # mA -> A
    n = obs.shape[0]
    mean = obs.mean(axis=0)
    u = obs.std(axis=0, ddof=1) / np.sqrt(n)
    r = np.corrcoef(obs, rowvar=False)
    names = ["V", "I", "phi"]
    items = [
        InputQuantity(nm, float(mean[i]), float(u[i]), dof=n - 1.0, kind="A", group=nm)
        for i, nm in enumerate(names)
    ]
    return InputSet.from_matrix(items, r)


@pytest.fixture
def rng() -> np.random.Generator:
    return np.random.default_rng(20261201)
