"""Reading and writing light curves: the edge where files become :class:`LightCurve`.

Readers choose the format by content and extension and all return the same immutable
:class:`~rotinfer.lightcurve.LightCurve` (days relative to a recorded reference epoch).
Bad files raise :class:`~rotinfer.errors.InputError` with one line naming the file and
the problem. Nothing here ever modifies an input file.

Public functions: :func:`read_light_curve`, :func:`read_stars`, :func:`stitch`,
:func:`from_arrays`, :func:`from_table`, :func:`write_light_curve`, :func:`file_checksum`.
"""

from ._arrays import file_checksum, from_arrays
from ._columns import DEFAULT_QUALITY_BITMASK, parse_quality_bitmask
from ._read import read_light_curve, read_stars, stitch
from ._table import from_table
from ._write import WRITE_FORMATS, write_light_curve

__all__ = [
    "DEFAULT_QUALITY_BITMASK",
    "WRITE_FORMATS",
    "file_checksum",
    "from_arrays",
    "from_table",
    "parse_quality_bitmask",
    "read_light_curve",
    "read_stars",
    "stitch",
    "write_light_curve",
]
