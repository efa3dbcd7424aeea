"""rotinfer: stellar rotation periods from light curves, with honest uncertainties."""

from importlib.metadata import PackageNotFoundError, version

from .errors import ConfigError, InputError, NotConvergedError, RotinferError
from .lightcurve import LightCurve, LightCurveMeta, MaskRecord, PreparedLightCurve

try:
    __version__ = version("rotinfer")
except PackageNotFoundError:  # running from a source tree that was never installed
    __version__ = "0.0.0+unknown"

__all__ = [
    "ConfigError",
    "InputError",
    "LightCurve",
    "LightCurveMeta",
    "MaskRecord",
    "NotConvergedError",
    "PreparedLightCurve",
    "RotinferError",
    "__version__",
]
