"""floeheat.units: conversions come from the units library; same spellings skip it."""

import subprocess
import sys

import numpy as np

from floeheat import constants
from floeheat.units import conversion, convert


def test_centimetre_constant_agrees_with_the_units_library():
    # reference: pint with cf-xarray's UDUNITS-style registry (PyPI); SI Brochure Table 7
    assert convert(1.0, "cm", "m") == constants.M_PER_CM


def test_same_spelling_converts_nothing_and_leaves_the_registry_unloaded():
    code = ("import sys, numpy as np; from floeheat.units import conversion; "
            "v = conversion('degC', 'degC')(np.array([-1.8, 2.0])); "
            "v2 = conversion('PSU', 'psu')([34.5]); "
            "assert v.tolist() == [-1.8, 2.0] and v2.tolist() == [34.5]; "
            "print('cf_xarray.units' in sys.modules, 'pint' in sys.modules)")
    out = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True,
                         check=True).stdout.split()
    assert out == ["False", "False"]


def test_different_spellings_still_go_through_the_registry():
    # 1 dbar = 1e4 Pa (definition of the bar, SI Brochure Table 8)
    assert np.isclose(conversion("Pa", "dbar")(1e4), 1.0)
    assert np.isclose(conversion("decibar", "dbar")(3.0), 3.0)
