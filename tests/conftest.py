"""Shared test fixtures (small and seeded; every test writes only under ``tmp_path``).

* ``blas_single_thread`` (autouse, whole session): limits BLAS to one thread. On small dense
  matrices (the growth estimator's snapshot fit, the dense Galerkin references) multithreaded
  OpenBLAS is 10-80x slower than one thread on the 2-core test machines.
* ``rng``: a seeded numpy Generator.
* ``write_case``: writes a TOML case file into ``tmp_path`` and returns its path.
* ``random_field``: a seeded random solenoidal spectral field on a box (for stepping tests).
"""

from __future__ import annotations

import textwrap

import numpy as np
import pytest
from threadpoolctl import threadpool_limits


@pytest.fixture(autouse=True, scope="session")
def blas_single_thread():
    with threadpool_limits(limits=1, user_api="blas"):
        yield


@pytest.fixture
def rng():
    return np.random.default_rng(20261202)


@pytest.fixture
def write_case(tmp_path):
    """``write_case(text, name="case.toml") -> Path`` (text is dedented)."""

    def write(text: str, name: str = "case.toml"):
        path = tmp_path / name
        path.write_text(textwrap.dedent(text), encoding="utf-8")
        return path

    return write


@pytest.fixture
def random_field():
    """``random_field(box, engine, seed=1, peak=None) -> b_hat``: unit-energy, solenoidal, zero-mean,
    inside the 2/3-rule band (kindyn.initial_fields.random_field_hat; its properties are tested elsewhere)."""
    from kindyn.initial_fields import random_field_hat

    def make(box, engine, seed: int = 1, peak: float | None = None):
        from kindyn.layout import BoxLayout

        peak = peak if peak is not None else 2 * np.pi / min(box.lengths) * 2
        return random_field_hat(BoxLayout(box), seed, peak).astype(engine.spectral.dtype)

    return make
