"""Command-line options for stellar parameters, shared by ``fit`` and other subcommands.

Use :func:`stellar_options` as a decorator on a click command that takes ``**opts``, then
``stellar_from_options(opts)`` and ``relations_from_options(opts)`` to build the arguments
of :func:`rotinfer.derived.derive`.
"""

from __future__ import annotations

from collections.abc import Mapping
from typing import Any

import click

from ..derived import DEFAULT_RELATIONS, StellarParameters, available_gyro_relations
from ..errors import InputError

__all__ = ["STELLAR_OPTION_NAMES", "relations_from_options", "stellar_from_options",
           "stellar_options"]

# (option, parameter name, metavar, help)
_OPTIONS = (
    ("--radius", "radius", "R", "Stellar radius in solar radii (IAU 2015 nominal)."),
    ("--radius-err", "radius_err", "R", "1-sigma uncertainty of --radius, solar radii."),
    ("--vsini", "vsini", "KM_S", "Projected rotation velocity v sin i in km/s."),
    ("--vsini-err", "vsini_err", "KM_S", "1-sigma uncertainty of --vsini in km/s."),
    ("--bv", "bv", "MAG", "Dereddened B-V colour in mag (for gyrochronological ages)."),
    ("--bv-err", "bv_err", "MAG", "1-sigma uncertainty of --bv in mag."),
    ("--mass", "mass", "M", "Stellar mass in solar masses (for the Rossby number)."),
    ("--mass-err", "mass_err", "M", "1-sigma uncertainty of --mass, solar masses."),
    ("--teff", "teff", "K", "Effective temperature in K (for the Rossby number)."),
    ("--teff-err", "teff_err", "K", "1-sigma uncertainty of --teff in K."),
)

STELLAR_OPTION_NAMES = tuple(p for _o, p, _m, _h in _OPTIONS) + ("gyro_relation",)


def stellar_options(func):
    """Click decorator adding the stellar-parameter options and ``--gyro-relation``.

    Options: ``--radius/--radius-err`` [R_sun], ``--vsini/--vsini-err`` [km/s],
    ``--bv/--bv-err`` [mag], ``--mass/--mass-err`` [M_sun], ``--teff/--teff-err`` [K],
    and ``--gyro-relation NAME`` (repeatable; ``all`` or one of the relations of
    :func:`rotinfer.derived.available_gyro_relations`; default all). A misspelt relation
    is a usage error listing the choices.
    """
    choices = (*available_gyro_relations(), "all")
    func = click.option(
        "--gyro-relation",
        "gyro_relation",
        type=click.Choice(choices),
        multiple=True,
        metavar="NAME",
        help=f"Gyrochronology relation ({', '.join(choices)}); repeatable. Default: all.",
    )(func)
    for opt, name, metavar, text in reversed(_OPTIONS):
        func = click.option(opt, name, type=float, default=None, metavar=metavar, help=text)(
            func
        )
    return func


def stellar_from_options(opts: Mapping[str, Any]) -> StellarParameters | None:
    """Stellar parameters from the options added by :func:`stellar_options`.

    Returns
    -------
    StellarParameters or None
        None when no stellar option was given.

    Raises
    ------
    InputError
        Naming the command line and the option, e.g. an uncertainty without its value or
        a non-positive radius.
    """
    values = {name: opts.get(name) for _o, name, _m, _h in _OPTIONS}
    if all(v is None for v in values.values()):
        return None
    for opt, name, _m, _h in _OPTIONS:
        if name.endswith("_err") and values[name] is not None:
            base = name[: -len("_err")]
            if values[base] is None:
                raise InputError("command line", f"{opt} given without --{base}")
    try:
        return StellarParameters(**values)
    except InputError as exc:
        raise InputError("command line", exc.problem) from None


def relations_from_options(opts: Mapping[str, Any]) -> tuple[str, ...]:
    """The gyrochronology relations chosen with ``--gyro-relation`` (default: all)."""
    chosen = tuple(opts.get("gyro_relation") or ())
    if not chosen or "all" in chosen:
        return tuple(DEFAULT_RELATIONS)
    return tuple(dict.fromkeys(chosen))
