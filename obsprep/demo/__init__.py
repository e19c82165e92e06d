"""The "weddell-spring" demo scenario: invented, realistic synthetic data with a known truth.

:func:`write_demo` writes a model grid, observation files of every supported family (CF
netCDF following ``docs/file-conventions.md``), the truth on the model grid, a build
configuration and a manifest.  :func:`truth_value` evaluates the known truth anywhere, so the
super-observations built from the demo can be compared with it exactly.
"""

from obsprep.demo.scenario import CONFIG_NAME, MANIFEST_NAME, SCENARIO_NAME
from obsprep.demo.truth import truth_value
from obsprep.demo.write import write_demo

__all__ = ["write_demo", "truth_value", "SCENARIO_NAME", "CONFIG_NAME", "MANIFEST_NAME"]
