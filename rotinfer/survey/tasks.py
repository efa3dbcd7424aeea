"""One unit of survey work per star: :class:`StarTask`, safe folder names and per-star seeds.

A survey turns a list of stars into a list of frozen :class:`StarTask` objects
before anything runs. Each task carries the star's identifier exactly as the user
gave it (the catalogue key and the source of its seed) and a *folder name* that is
safe to create under the output folder: identifiers such as ``../../etc``,
``/abs/path``, ``TIC 123/4`` or ``""`` are sanitised so nothing is ever written
outside ``--out``, and names that coincide after sanitising are made unique
deterministically.
"""

from __future__ import annotations

import hashlib
import re
import unicodedata
from collections import defaultdict
from collections.abc import Iterable, Mapping, Sequence
from dataclasses import dataclass, field

import numpy as np

__all__ = ["StarTask", "assign_folder_names", "sanitise_identifier", "star_seed"]

#: Characters allowed in a star folder name; anything else becomes ``_``.
_UNSAFE = re.compile(r"[^A-Za-z0-9._+-]+")
#: Names Windows refuses as file names whatever the extension (common practice).
_RESERVED = {"con", "prn", "aux", "nul"} | {f"{p}{i}" for p in ("com", "lpt") for i in range(10)}
#: Longest folder name kept before it is shortened with a hash (file systems allow 255 bytes).
MAX_NAME = 100
_FALLBACK = "star"


@dataclass(frozen=True)
class StarTask:
    """Everything a worker needs to analyse one star.

    Attributes
    ----------
    identifier : str
        The star's identifier as given (manifest ``identifier`` column or file stem).
        It is the catalogue key and, with the master seed, fixes the star's seed.
    name : str
        Folder name under ``<out>/stars/``: sanitised, unique within the survey.
    files : tuple of str
        Absolute paths of the star's light-curve files (several sectors of one star
        are stitched, one segment per file).
    stellar : tuple of (str, object) pairs
        Optional stellar parameters from the manifest (radius, v sin i, colour, mass
        and their uncertainties), column name to value, in manifest column order.
    source : str
        Where the task came from (the manifest path, or the folder or pattern), for messages.
    """

    identifier: str
    name: str
    files: tuple[str, ...]
    stellar: tuple[tuple[str, object], ...] = field(default=())
    source: str = ""

    @property
    def stellar_parameters(self) -> dict[str, object]:
        """The stellar parameters as a plain dict (empty when the manifest had none)."""
        return dict(self.stellar)


def sanitise_identifier(identifier: str) -> str:
    """Turn an identifier into a folder name that cannot leave its parent folder.

    Unicode is normalised (NFKC); every run of characters outside
    ``A-Z a-z 0-9 . _ + -`` (path separators, spaces, control characters,
    non-ASCII letters) becomes one ``_``; leading ``.``, ``_`` and ``-`` and
    trailing ``.`` are stripped, so ``..``, hidden names and option-like names
    cannot occur; Windows device names get a trailing ``_``; names longer than
    :data:`MAX_NAME` characters are shortened and end with a hash of the full
    identifier. An identifier with nothing usable gives ``"star"``.

    Parameters
    ----------
    identifier : str
        Any string.

    Returns
    -------
    str
        A non-empty name of at most :data:`MAX_NAME` characters. Distinct identifiers
        may give the same name; :func:`assign_folder_names` resolves that.
    """
    text = unicodedata.normalize("NFKC", str(identifier))
    name = _UNSAFE.sub("_", text)
    name = re.sub(r"_+", "_", name).lstrip("._-").rstrip(".")
    if not name:
        name = _FALLBACK
    if name.split(".")[0].lower() in _RESERVED:
        name = name + "_"
    if len(name) > MAX_NAME:
        name = name[: MAX_NAME - 9].rstrip("._-") + "-" + _short_hash(identifier, 8)
    return name


def _short_hash(identifier: str, digits: int) -> str:
    return hashlib.sha256(str(identifier).encode("utf-8")).hexdigest()[:digits]


def assign_folder_names(identifiers: Sequence[str]) -> list[str]:
    """Unique, safe folder names for distinct identifiers, independent of their order.

    Each identifier is sanitised with :func:`sanitise_identifier`. Identifiers whose
    names coincide (compared case-insensitively, so the result is also safe on
    case-insensitive file systems) all get ``-`` and the first 8 hex digits of the
    SHA-256 of the identifier appended; in the astronomically unlikely case that
    this still collides, 16 digits are used.

    Parameters
    ----------
    identifiers : sequence of str
        Distinct identifiers (duplicates are the caller's error to report).

    Returns
    -------
    list of str
        One name per identifier, in the same order.

    Raises
    ------
    ValueError
        If ``identifiers`` contains duplicates (a programming error: callers check).
    """
    if len(set(identifiers)) != len(identifiers):
        raise ValueError("assign_folder_names needs distinct identifiers")
    names = [sanitise_identifier(i) for i in identifiers]
    groups: dict[str, list[int]] = defaultdict(list)
    for k, name in enumerate(names):
        groups[name.casefold()].append(k)
    for members in groups.values():
        if len(members) > 1:
            for k in members:
                names[k] = _with_hash(names[k], identifiers[k], 8)
    # A hashed name could in principle equal another star's plain name: lengthen the hash.
    counts: dict[str, int] = defaultdict(int)
    for name in names:
        counts[name.casefold()] += 1
    for k, name in enumerate(names):
        if counts[name.casefold()] > 1:
            names[k] = _with_hash(sanitise_identifier(identifiers[k]), identifiers[k], 16)
    if len({n.casefold() for n in names}) != len(names):  # pragma: no cover - SHA-256 collision
        raise ValueError("could not make unique folder names")
    return names


def _with_hash(name: str, identifier: str, digits: int) -> str:
    base = name[: MAX_NAME - digits - 1]
    return f"{base}-{_short_hash(identifier, digits)}"


def star_seed(master_seed: int, identifier: str) -> int:
    """The seed of one star, from the survey's master seed and the star's identifier.

    The 256-bit SHA-256 digest of the UTF-8 identifier and the master seed are
    the entropy of a :class:`numpy.random.SeedSequence`, whose first 63-bit state
    word is the seed. It therefore depends only on ``(master_seed, identifier)``:
    never on the order stars run in, the number of workers or the executor.

    Parameters
    ----------
    master_seed : int
        Non-negative survey seed (``--seed``).
    identifier : str
        The star's identifier.

    Returns
    -------
    int
        A seed in ``[0, 2**63)``.

    Raises
    ------
    ValueError
        If ``master_seed`` is negative (SeedSequence entropy must be non-negative).

    References
    ----------
    NumPy documentation, "Parallel random number generation" (SeedSequence spawning
    from a master seed and a per-task key).
    """
    if int(master_seed) < 0:
        raise ValueError(f"the master seed must be non-negative, got {master_seed}")
    digest = hashlib.sha256(str(identifier).encode("utf-8")).digest()
    words = np.frombuffer(digest, dtype="<u4").tolist()
    state = np.random.SeedSequence([int(master_seed), *words]).generate_state(1, dtype=np.uint64)
    return int(state[0] >> np.uint64(1))


def make_tasks(
    rows: Iterable[tuple[str, Sequence[str], Mapping[str, object]]], *, source: str
) -> list[StarTask]:
    """Build tasks from ``(identifier, files, stellar)`` rows with distinct identifiers.

    The caller has already checked that identifiers are distinct; folder names are
    assigned here so that they are unique across the whole survey.
    """
    rows = list(rows)
    names = assign_folder_names([r[0] for r in rows])
    return [
        StarTask(
            identifier=ident,
            name=name,
            files=tuple(str(f) for f in files),
            stellar=tuple(stellar.items()),
            source=source,
        )
        for (ident, files, stellar), name in zip(rows, names, strict=True)
    ]
