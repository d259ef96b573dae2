"""Precipitation factor and bias helpers: formula values and exactness."""

import numpy as np
import pytest

from regionmap.downscale import bias, precip


def test_thornton1997_factor_values_and_bounds():
    # Thornton et al. (1997) as in Liston & Elder (2006) [calc], chi = 0.35 km-1:
    # +1 km -> x2.0769, +0.5 km -> x1.4242, -0.5 km -> x0.7021; the default bounds cap 1.5.
    f = precip.precip_factor_thornton1997(
        np.array([1000.0, 500.0, -500.0]), 0.35, bounds=(0.0, 10.0)
    )
    np.testing.assert_allclose(f, [2.0769, 1.4242, 0.7021], atol=1e-4)
    f = precip.precip_factor_thornton1997(np.array([1000.0, -3000.0]), 0.35)
    np.testing.assert_allclose(f, [1.5, 0.5])


def test_monthly_bias_needs_12_values():
    with pytest.raises(ValueError, match="12"):
        bias.monthly_values([1, 2, 3], np.array([0, 1]))
    out = bias.apply_offset_factor(
        np.ones((2, 3)), np.array([0, 5, 11]), factor=list(range(1, 13)), offset=0.5
    )
    np.testing.assert_array_equal(out, [[1.5, 6.5, 12.5]] * 2)
