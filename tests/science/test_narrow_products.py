"""Pairwise-dot products of tall, narrow matrices (tracedesk.science.narrow_products).

Reference: numpy's matrix product ``A.T @ B`` (BLAS), which the pairwise form must equal to rounding.
"""

from __future__ import annotations

import numpy as np
import pytest
from numpy.testing import assert_allclose

from tracedesk.science.narrow_products import NARROW_COLUMNS, cross_product, gram_matrix


@pytest.mark.parametrize("columns", [1, 3, NARROW_COLUMNS, NARROW_COLUMNS + 1])
def test_gram_matrix_equals_the_blas_product(columns: int) -> None:
    matrix = np.asfortranarray(np.random.default_rng(columns).normal(size=(5_000, columns)))
    gram = gram_matrix(matrix)
    assert_allclose(gram, matrix.T @ matrix, rtol=1e-12, atol=1e-9)
    assert np.array_equal(gram, gram.T)


@pytest.mark.parametrize(("left", "right"), [(2, 3), (4, 4), (3, NARROW_COLUMNS + 2)])
def test_cross_product_equals_the_blas_product(left: int, right: int) -> None:
    rng = np.random.default_rng(left * 10 + right)
    first, second = rng.normal(size=(4_000, left)), rng.normal(size=(4_000, right))
    assert_allclose(cross_product(first, second), first.T @ second, rtol=1e-12, atol=1e-9)
