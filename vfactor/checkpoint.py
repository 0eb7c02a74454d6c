"""The checkpoint of a resumable run: finished (node, round) tallies in ``OUT.h5.partial``.

NumPy ``.npz`` content (sparse rows: keys, indptr, cols, counts), written through :mod:`vfactor.atomic` every few seconds; it records
the model hash, seed, rays per round and node count, and one made for another model or
seed is refused in one line.
"""

from __future__ import annotations

import time
import zipfile
from pathlib import Path

import numpy as np

from . import atomic
from .errors import VfactorError
from .tallystats import PairTallies

__all__ = ["Checkpoint", "checkpoint_path", "CHECKPOINT_SUFFIX"]

CHECKPOINT_SUFFIX = ".partial"
_CHECKPOINT_KIND = "vfactor-checkpoint-2"
CHECKPOINT_EVERY_S = 5.0


def checkpoint_path(output_path) -> Path:
    """The checkpoint file of ``output_path``: the same name plus ``.partial``."""
    p = Path(output_path)
    return p.with_name(p.name + CHECKPOINT_SUFFIX)


class Checkpoint:
    """Finished (round, node) tallies of one computation, kept beside the output file."""

    def __init__(self, path: Path, *, model_sha256, seed, rays_per_round, n_nodes):
        self.path = path
        self.identity = {"model_sha256": str(model_sha256), "seed": int(seed),
                         "rays_per_round": int(rays_per_round), "n_nodes": int(n_nodes)}
        self.tallies: dict = {}   # (round, node) -> PairTallies of one row
        self._last = time.monotonic()

    def load(self) -> int:
        """Read an existing checkpoint; return how many (round, node) tallies it held."""
        if not self.path.exists():
            return 0
        try:
            # opened here: np.load leaves its own handle open when the zip is unreadable
            with open(self.path, "rb") as fh:
                z = np.load(fh, allow_pickle=False)
                if not isinstance(z, np.lib.npyio.NpzFile):  # a bare .npy array
                    raise ValueError("a single array, not a checkpoint archive")
                kind = str(z["kind"])
                ident = {"model_sha256": str(z["model_sha256"]), "seed": int(z["seed"]),
                         "rays_per_round": int(z["rays_per_round"]),
                         "n_nodes": int(z["n_nodes"])}
                keys, indptr = z["keys"], z["indptr"]
                cols, counts = z["cols"], z["counts"]
                z.close()
        except (OSError, KeyError, ValueError, EOFError, zipfile.BadZipFile) as exc:
            # a truncated or foreign file: np.load raises BadZipFile or EOFError for a cut
            # .npz, ValueError for other content
            reason = " ".join(str(exc).split()) or type(exc).__name__
            raise VfactorError(f"{self.path}: unreadable checkpoint ({reason}); delete it or "
                               "run without --resume") from None
        if kind != _CHECKPOINT_KIND:
            raise VfactorError(f"{self.path}: not a vfactor checkpoint (kind {kind!r})")
        for name, value in ident.items():
            if value != self.identity[name]:
                raise VfactorError(
                    f"{self.path}: checkpoint belongs to another computation ({name} "
                    f"{value!r}, this run {self.identity[name]!r}); delete it or run without "
                    "--resume")
        if indptr.size != len(keys) + 1 or cols.size != counts.size or \
                (indptr.size and int(indptr[-1]) != cols.size):
            raise VfactorError(f"{self.path}: unreadable checkpoint (inconsistent rows); "
                               "delete it or run without --resume")
        rows = PairTallies(indptr.astype(np.int64), cols.astype(np.int64),
                           counts.astype(np.int64), self.identity["n_nodes"] + 2)
        for p, (r, i) in enumerate(keys):
            self.tallies[(int(r), int(i))] = rows.row(p)
        return len(self.tallies)

    def add(self, rounds, nodes, tallies, force=False):
        """Keep the :class:`PairTallies` rows of the (round, node) pairs just finished."""
        if not isinstance(tallies, PairTallies):
            tallies = PairTallies.from_dense(np.asarray(tallies, dtype=np.int64))
        for p, (r, i) in enumerate(zip(rounds, nodes)):
            self.tallies[(int(r), int(i))] = tallies.row(p)
        if force or time.monotonic() - self._last >= CHECKPOINT_EVERY_S:
            self.save()

    def save(self):
        keys = np.array(sorted(self.tallies), dtype=np.int64).reshape(-1, 2)
        if len(keys):
            rows = PairTallies.concat([self.tallies[tuple(k)] for k in keys.tolist()])
        else:
            rows = PairTallies(np.zeros(1, np.int64), np.zeros(0, np.int64),
                               np.zeros(0, np.int64), self.identity["n_nodes"] + 2)
        ident = dict(self.identity, seed=np.uint64(self.identity["seed"]))
        with atomic.open_atomic(self.path, "the checkpoint") as fh:
            np.savez(fh, kind=_CHECKPOINT_KIND, keys=keys, indptr=rows.indptr, cols=rows.cols,
                     counts=rows.counts, **ident)
        self._last = time.monotonic()

    def remove(self):
        if self.path.exists():
            self.path.unlink()
