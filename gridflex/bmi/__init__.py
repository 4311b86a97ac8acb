"""Basic Model Interface (BMI 2.0, CSDMS) to gridflex's glacial response.

``gridflex.bmi.FlexureBmi`` (module :mod:`gridflex.bmi.flexure`) wraps one
:class:`gridflex.IceStepper`, configured from a TOML file (:mod:`gridflex.bmi.config`).
"""

from gridflex.bmi.flexure import FlexureBmi

__all__ = ["FlexureBmi"]
