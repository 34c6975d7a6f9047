"""Plot axes in engineering prefixes (the tick labels read 0 to 999 of a prefixed unit)."""

import numpy as np

from mna.report import value_scale


def test_axis_takes_the_prefix_of_the_largest_value():
    assert value_scale([np.array([0.0, 1e-5, 2.2e-5])], "H") == (1e-6, "\u00b5H")
    assert value_scale([np.array([0.0, 0.5]), np.array([-0.9, 0.1])], "A") == (1e-3, "mA")
    assert value_scale([np.array([0.0, 3e3])], "V") == (1e3, "kV")
    assert value_scale([np.array([0.0, 12.0])], "V") == (1.0, "V")


def test_units_that_take_no_prefix_and_empty_series_are_left_alone():
    assert value_scale([np.array([0.0, 3000.0])], "rpm") == (1.0, "rpm")
    assert value_scale([np.array([0.0, 0.0])], "V") == (1.0, "V")
    assert value_scale([np.array([np.nan])], "V") == (1.0, "V")
    assert value_scale([np.array([0.5])], "") == (1.0, "")
