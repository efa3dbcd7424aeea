"""One HDF5 file per star holding the chains as they grow, so a fit can resume.

Layout of ``chains.h5`` (format ``rotinfer-chains``, version 1)::

    /                      attrs: format, format_version, fingerprint
    /json/<key>            attrs["value"]: JSON text (e.g. the modes found by optimisation)
    /<group>/              one group per sampled mode and ensemble, e.g. "mode0/ensemble1",
                           and one per ensemble's discarded warm-up, e.g. "mode0/warmup1"
        chain              float64 (n_steps, n_walkers, ndim), unconstrained parameters
        log_prob           float64 (n_steps, n_walkers), log posterior of each position
        block_end          int64 (n_blocks,), steps complete at the end of each block
        accepted           int64 (n_blocks, n_walkers), accepted proposals per walker so far
        rng_keys           uint32 (n_blocks, 624), MT19937 state after each block
        rng_meta           float64 (n_blocks, 3), its pos, has_gauss, cached_gaussian
                           attrs: n_steps (steps complete), names (parameter names)

The file is appended to after every block of steps (``[sampler] check_every``),
opened and closed each time, and ``n_steps`` is written last: a block cut off by
an interruption is ignored on resume. The sampler state is kept for every block
end, so ensembles interrupted at different blocks are resumed from the last
block all of them completed. The *fingerprint* (a hash of the data, the model
and sampler settings that shape the chains, and the seed) must match for a file
to be resumed; otherwise it is replaced.
"""

from __future__ import annotations

import json
import logging
from dataclasses import dataclass
from pathlib import Path

import h5py
import numpy as np

__all__ = ["Checkpoint", "SavedEnsemble"]

log = logging.getLogger("rotinfer")

FORMAT = "rotinfer-chains"
FORMAT_VERSION = 1


@dataclass(frozen=True)
class SavedEnsemble:
    """An ensemble's stored chain and the sampler state after its last step."""

    chain: np.ndarray
    log_prob: np.ndarray
    accepted: np.ndarray
    random_state: tuple


class Checkpoint:
    """The checkpoint file of one star.

    Parameters
    ----------
    path : str or Path
        File to use (created with its folder if missing).
    fingerprint : str
        Identity of the fit; a file with another fingerprint is replaced.
    also_accept : sequence of str, optional
        Older forms of the same identity (fingerprints computed as an earlier version
        did): a file carrying one is resumed and relabelled with ``fingerprint``.

    Attributes
    ----------
    resumed : bool
        True when an existing file with the same fingerprint was found.
    """

    def __init__(self, path, *, fingerprint: str, also_accept=()):
        self.path = Path(path)
        self.fingerprint = str(fingerprint)
        accepted = {self.fingerprint, *map(str, also_accept)}
        relabel = False
        self.resumed = False
        self.path.parent.mkdir(parents=True, exist_ok=True)
        if self.path.exists():
            try:
                with h5py.File(self.path, "r") as f:
                    ok = (
                        f.attrs.get("format") == FORMAT
                        and int(f.attrs.get("format_version", -1)) == FORMAT_VERSION
                        and f.attrs.get("fingerprint") in accepted
                    )
                    relabel = ok and f.attrs.get("fingerprint") != self.fingerprint
            except OSError:
                ok = False
                log.warning("%s: unreadable checkpoint, starting the fit afresh", self.path)
            if ok:
                self.resumed = True
                if relabel:
                    with h5py.File(self.path, "a") as f:
                        f.attrs["fingerprint"] = self.fingerprint
                return
            log.info("%s: checkpoint is for another fit; replacing it", self.path)
        with h5py.File(self.path, "w") as f:
            f.attrs["format"] = FORMAT
            f.attrs["format_version"] = FORMAT_VERSION
            f.attrs["fingerprint"] = self.fingerprint

    # ----------------------------------------------------------------- JSON
    def save_json(self, key: str, value) -> None:
        """Store a JSON-serialisable object under ``key``."""
        with h5py.File(self.path, "a") as f:
            g = f.require_group("json")
            if key in g:
                del g[key]
            d = g.create_group(key)
            d.attrs["value"] = json.dumps(value)

    def load_json(self, key: str):
        """The object stored under ``key``, or None."""
        with h5py.File(self.path, "r") as f:
            if "json" in f and key in f["json"]:
                return json.loads(f["json"][key].attrs["value"])
        return None

    # ------------------------------------------------------------- ensembles
    def load_ensemble(self, group: str, n_steps: int | None = None) -> SavedEnsemble | None:
        """The stored chain of ``group`` up to ``n_steps`` (a block end; default: all).

        Returns None when nothing complete is stored, or when ``n_steps`` is not
        the end of a stored block.
        """
        with h5py.File(self.path, "r") as f:
            if group not in f:
                return None
            g = f[group]
            n_done = int(g.attrs.get("n_steps", 0))
            if n_done == 0:
                return None
            ends = np.array(g["block_end"][...])
            n = n_done if n_steps is None else int(n_steps)
            hits = np.flatnonzero(ends == n)
            if n > n_done or hits.size == 0:
                return None
            b = int(hits[0])
            meta = g["rng_meta"][b]
            state = (
                "MT19937",
                np.array(g["rng_keys"][b], dtype=np.uint32),
                int(meta[0]),
                int(meta[1]),
                float(meta[2]),
            )
            return SavedEnsemble(
                chain=np.array(g["chain"][:n]),
                log_prob=np.array(g["log_prob"][:n]),
                accepted=np.array(g["accepted"][b]),
                random_state=state,
            )

    def stored_steps(self, group: str) -> int:
        """Steps complete in ``group`` (0 when absent)."""
        with h5py.File(self.path, "r") as f:
            return int(f[group].attrs.get("n_steps", 0)) if group in f else 0

    def truncate(self, group: str, n_steps: int) -> None:
        """Forget everything of ``group`` after step ``n_steps`` (a block end, or 0: all of it,
        as when another ensemble was stopped inside its first block)."""
        with h5py.File(self.path, "a") as f:
            g = f[group]
            ends = np.array(g["block_end"][...])
            keep = int(np.sum(ends <= n_steps))
            if n_steps != 0 and (keep == 0 or ends[keep - 1] != n_steps):
                raise ValueError(f"{group}: step {n_steps} is not the end of a stored block")
            g.attrs["n_steps"] = int(n_steps)
            for name in ("block_end", "accepted", "rng_keys", "rng_meta"):
                g[name].resize(keep, axis=0)
            g["chain"].resize(n_steps, axis=0)
            g["log_prob"].resize(n_steps, axis=0)

    def append(self, group: str, chain, log_prob, accepted, random_state, *, names=()) -> None:
        """Append a block of steps to ``group`` and record the sampler state after it.

        Parameters
        ----------
        chain : ndarray (n_new, n_walkers, ndim)
        log_prob : ndarray (n_new, n_walkers)
        accepted : ndarray (n_walkers,)
            Cumulative accepted counts after the block.
        random_state : tuple
            ``numpy.random.RandomState.get_state()`` after the block.
        """
        chain = np.asarray(chain, dtype=np.float64)
        log_prob = np.asarray(log_prob, dtype=np.float64)
        n_new, n_walkers, ndim = chain.shape
        name, keys, pos, has_gauss, cached = random_state
        if name != "MT19937":
            raise ValueError(f"unexpected random state kind {name!r}")
        with h5py.File(self.path, "a") as f:
            if group in f:
                g = f[group]
            else:
                g = f.create_group(group)
                g.create_dataset(
                    "chain", shape=(0, n_walkers, ndim), maxshape=(None, n_walkers, ndim),
                    dtype="f8", chunks=(64, n_walkers, ndim),
                )
                g.create_dataset(
                    "log_prob", shape=(0, n_walkers), maxshape=(None, n_walkers), dtype="f8",
                    chunks=(64, n_walkers),
                )
                g.create_dataset("block_end", shape=(0,), maxshape=(None,), dtype="i8")
                g.create_dataset("accepted", shape=(0, n_walkers), maxshape=(None, n_walkers),
                                 dtype="i8")
                g.create_dataset("rng_keys", shape=(0, 624), maxshape=(None, 624), dtype="u4")
                g.create_dataset("rng_meta", shape=(0, 3), maxshape=(None, 3), dtype="f8")
                g.attrs["n_steps"] = 0
                g.attrs["names"] = json.dumps(list(names))
            n_old = int(g.attrs["n_steps"])
            total = n_old + n_new
            g["chain"].resize(total, axis=0)
            g["log_prob"].resize(total, axis=0)
            g["chain"][n_old:total] = chain
            g["log_prob"][n_old:total] = log_prob
            nb = int(np.sum(np.array(g["block_end"][...]) <= n_old))
            for dset in ("block_end", "accepted", "rng_keys", "rng_meta"):
                g[dset].resize(nb + 1, axis=0)
            g["block_end"][nb] = total
            g["accepted"][nb] = np.asarray(accepted, dtype=np.int64)
            g["rng_keys"][nb] = np.asarray(keys, dtype=np.uint32)
            g["rng_meta"][nb] = [float(pos), float(has_gauss), float(cached)]
            f.flush()
            g.attrs["n_steps"] = total  # last: marks the block complete
