"""Preparation: from a light curve as read to one ready for period search and inference.

Steps, in order (each recorded in :attr:`PreparedLightCurve.notes`, each removed point in
:attr:`PreparedLightCurve.masked` with its reason):

1. refuse infinite values and uncertainties <= 0; drop rows with NaN (``"non-finite"``);
2. sort by time;
3. split into segments at file boundaries and at gaps longer than
   ``max(gap_factor x cadence, gap_min)``;
4. normalise each segment by its median (relative flux), so that offsets between sectors
   or seasons cannot fake a long-period signal;
5. merge exactly duplicated timestamps (weighted mean; identical copies kept once);
6. reject flares and outliers asymmetrically against a smooth local estimate (see
   :func:`reject_flares`);
7. give every point an uncertainty: the input's, or where there was none a robust
   point-to-point scatter per segment (``meta.has_flux_err`` stays False);
8. choose the period range from the data (or take the one given);
9. optionally remove slow trends per segment (off by default);
10. bin only when more than ``max_points`` points remain, never wider than
    ``bin_fraction x min_period``.

Amplitudes and scatter are shown to users in parts per thousand (ppt).
"""

from ._binning import bin_light_curve
from ._config import PrepareConfig
from ._core import prepare
from ._flares import reject_flares

__all__ = ["PrepareConfig", "bin_light_curve", "prepare", "reject_flares"]
