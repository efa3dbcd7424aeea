"""Reading and writing light curves: the edge where files become :class:`LightCurve`.

Readers choose the format by content and extension and all return the same immutable
:class:`~rotinfer.lightcurve.LightCurve` (days relative to a recorded reference epoch).
Bad files raise :class:`~rotinfer.errors.InputError` with one line naming the file and
the problem. Nothing here ever modifies an input file.
"""

from ._arrays import file_checksum, from_arrays
from ._write import WRITE_FORMATS, write_light_curve

__all__ = [
    "WRITE_FORMATS",
    "file_checksum",
    "from_arrays",
    "write_light_curve",
]
