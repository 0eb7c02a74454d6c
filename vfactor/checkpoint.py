"""The checkpoint of a resumable run: the finished work of every stage in ``OUT.h5.partial``.

A run keeps, per stage, what its finished jobs returned, in *sections* of one file:

* ``view`` and ``gebhart_ir`` — (round, node) tallies of ray tracing as sparse rows
  (:class:`PairSection`), under the rays per round of that stage;
* ``heating`` — the per-step rows of the heating stage (:class:`StepSection`), under the
  rays per facet, Sun samples and step count of the run.

NumPy ``.npz`` content (``SECTION.keys``, ``SECTION.indptr``, ... and a JSON list of the
sections with their identities), written through :mod:`vfactor.atomic` at most every
:data:`CHECKPOINT_EVERY_S` seconds (less often when a save takes long, so that saving
stays a small share of the run) and when the run stops. The file records the model hash,
seed and node count, each section its own settings; a checkpoint made for another model,
seed or setting is refused in one line.
"""

from __future__ import annotations

import json
import time
import zipfile
from pathlib import Path

import numpy as np

from . import atomic
from .errors import VfactorError
from .tallystats import PairTallies

__all__ = ["Checkpoint", "PairSection", "StepSection", "checkpoint_path", "CHECKPOINT_SUFFIX",
           "CHECKPOINT_EVERY_S"]

CHECKPOINT_SUFFIX = ".partial"
#: Changes whenever the rays of a stage change for the same model and seed (4: the planet
#: rays of the heating stage drawn from one sequence per node; view-factor rounds after
#: the 16th larger), or the sums of their results (5: the heating stage's own couplings
#: added per side's first-hit runs; load errors with the couplings' error; 6: coupling
#: rays from Owen-scrambled Sobol' points, load errors with what the planet rays cannot
#: resolve; 7: that error one ray of a node's pooled rays, not a sum over its sides; 8:
#: planet rays by need), so that a run never resumes from steps or tallies of other rays,
#: rounding or error model.
_CHECKPOINT_KIND = "vfactor-checkpoint-8"
#: Shortest time between two saves of the checkpoint [s].
CHECKPOINT_EVERY_S = 5.0
#: A save may take at most this share of the time between saves [1].
_SAVE_SHARE = 0.1


def checkpoint_path(output_path) -> Path:
    """The checkpoint file of ``output_path``: the same name plus ``.partial``."""
    p = Path(output_path)
    return p.with_name(p.name + CHECKPOINT_SUFFIX)


def _unreadable(path, reason) -> VfactorError:
    return VfactorError(f"{path}: unreadable checkpoint ({reason}); delete it or run without "
                        "--resume")


def _other_computation(path, what, value, mine) -> VfactorError:
    return VfactorError(f"{path}: checkpoint belongs to another computation ({what} {value!r}, "
                        f"this run {mine!r}); delete it or run without --resume")


class PairSection:
    """Finished (round, node) tallies of one ray-tracing stage.

    Attributes
    ----------
    tallies : dict — ``(round, node) -> PairTallies`` of one row
    """

    kind = "pairs"

    def __init__(self, owner: "Checkpoint", name: str, identity: dict, n_cols: int):
        self._owner, self.name, self.identity, self.n_cols = owner, name, identity, n_cols
        self.tallies: dict = {}

    def __len__(self):
        return len(self.tallies)

    def add(self, rounds, nodes, tallies):
        """Keep the :class:`PairTallies` rows of the (round, node) pairs just finished."""
        if not isinstance(tallies, PairTallies):
            tallies = PairTallies.from_dense(np.asarray(tallies, dtype=np.int64))
        for p, (r, i) in enumerate(zip(rounds, nodes)):
            self.tallies[(int(r), int(i))] = tallies.row(p)
        self._owner.save_if_due()

    def _arrays(self) -> dict:
        keys = np.array(sorted(self.tallies), dtype=np.int64).reshape(-1, 2)
        if len(keys):
            rows = PairTallies.concat([self.tallies[tuple(k)] for k in keys.tolist()])
        else:
            rows = PairTallies(np.zeros(1, np.int64), np.zeros(0, np.int64),
                               np.zeros(0, np.int64), self.n_cols)
        return {"keys": keys, "indptr": rows.indptr, "cols": rows.cols, "counts": rows.counts}

    def _restore(self, z, prefix):
        keys, indptr = z[prefix + "keys"], z[prefix + "indptr"]
        cols, counts = z[prefix + "cols"], z[prefix + "counts"]
        if keys.ndim != 2 or keys.shape[1] != 2 or indptr.size != len(keys) + 1 or \
                cols.size != counts.size or int(indptr[-1]) != cols.size:
            raise ValueError(f"section {self.name}: inconsistent rows")
        rows = PairTallies(indptr.astype(np.int64), cols.astype(np.int64),
                           counts.astype(np.int64), self.n_cols)
        for p, (r, i) in enumerate(keys.tolist()):
            self.tallies[(int(r), int(i))] = rows.row(p)


class StepSection:
    """Finished steps of the heating stage.

    Attributes
    ----------
    rows : dict — ``step -> {output name: 1-d array}``
    """

    kind = "steps"

    def __init__(self, owner: "Checkpoint", name: str, identity: dict):
        self._owner, self.name, self.identity = owner, name, identity
        self.rows: dict = {}

    def __len__(self):
        return len(self.rows)

    def add(self, steps, block: dict):
        """Keep the rows of the steps just finished (``block[name][p]`` is step ``steps[p]``)."""
        for p, k in enumerate(steps):
            self.rows[int(k)] = {name: np.array(values[p]) for name, values in block.items()}
        self._owner.save_if_due()

    def _arrays(self) -> dict:
        steps = np.array(sorted(self.rows), dtype=np.int64)
        names = sorted(self.rows[int(steps[0])]) if steps.size else []
        out = {"steps": steps}
        for name in names:
            out["row." + name] = np.stack([self.rows[int(k)][name] for k in steps])
        return out

    def _restore(self, z, prefix):
        steps = z[prefix + "steps"]
        names = [key[len(prefix) + 4:] for key in z if key.startswith(prefix + "row.")]
        block = {name: z[prefix + "row." + name] for name in names}
        if any(v.shape[:1] != steps.shape for v in block.values()):
            raise ValueError(f"section {self.name}: inconsistent rows")
        for p, k in enumerate(steps.tolist()):
            self.rows[int(k)] = {name: v[p] for name, v in block.items()}


class Checkpoint:
    """The finished work of one run, section by section, kept beside the output file.

    Parameters
    ----------
    path : pathlib.Path — the checkpoint file (:func:`checkpoint_path` of the output)
    model_sha256 : str — hash of the model the work belongs to
    seed : int
    n_nodes : int
    """

    def __init__(self, path: Path, *, model_sha256, seed, n_nodes):
        self.path = Path(path)
        self.identity = {"model_sha256": str(model_sha256), "seed": int(seed),
                         "n_nodes": int(n_nodes)}
        self._sections: dict = {}
        self._loaded: dict = {}      # section name -> (kind, identity, npz prefix)
        self._z = None
        self._next_save = time.monotonic() + CHECKPOINT_EVERY_S

    # -- reading ----------------------------------------------------------------------
    def load(self) -> int:
        """Read an existing checkpoint; return how many finished jobs' results it held
        (tallies and steps). The sections are restored when a stage asks for them."""
        if not self.path.exists():
            return 0
        try:
            # opened here: np.load leaves its own handle open when the zip is unreadable
            with open(self.path, "rb") as fh:
                z = np.load(fh, allow_pickle=False)
                if not isinstance(z, np.lib.npyio.NpzFile):  # a bare .npy array
                    raise ValueError("a single array, not a checkpoint archive")
                kind = str(z["kind"])
                if kind != _CHECKPOINT_KIND:
                    raise VfactorError(f"{self.path}: not a vfactor checkpoint of this version "
                                       f"(kind {kind!r}); delete it or run without --resume")
                ident = {"model_sha256": str(z["model_sha256"]), "seed": int(z["seed"]),
                         "n_nodes": int(z["n_nodes"])}
                sections = json.loads(str(z["sections"]))
                arrays = {key: z[key] for key in z.files}
                z.close()
        except (OSError, KeyError, ValueError, EOFError, zipfile.BadZipFile) as exc:
            # a truncated or foreign file: np.load raises BadZipFile or EOFError for a cut
            # .npz, ValueError for other content
            raise _unreadable(self.path, " ".join(str(exc).split()) or type(exc).__name__) \
                from None
        for name, value in ident.items():
            if value != self.identity[name]:
                raise _other_computation(self.path, name, value, self.identity[name])
        held = 0
        self._z = _Arrays(arrays)
        try:
            for entry in sections:
                name, kind, identity = entry["name"], entry["kind"], entry["identity"]
                self._loaded[name] = (kind, identity)
                held += int(entry["count"])
        except (KeyError, TypeError, ValueError) as exc:
            raise _unreadable(self.path, f"section list: {exc}") from None
        return held

    def _section(self, cls, name, identity, *args):
        if name in self._sections:
            return self._sections[name]
        section = cls(self, name, identity, *args)
        if name in self._loaded:
            kind, held = self._loaded[name]
            if kind != cls.kind:
                raise _unreadable(self.path, f"section {name} holds {kind}, not {cls.kind}")
            for what, value in held.items():
                if identity.get(what) != value:
                    raise _other_computation(self.path, f"{name} {what}", value,
                                             identity.get(what))
            try:
                section._restore(self._z, name + ".")
            except (KeyError, ValueError) as exc:
                raise _unreadable(self.path, str(exc)) from None
        self._sections[name] = section
        return section

    def pairs(self, name, *, rays_per_round) -> PairSection:
        """The section of (round, node) tallies ``name``, restored from the file if held."""
        return self._section(PairSection, name, {"rays_per_round": int(rays_per_round)},
                             self.identity["n_nodes"] + 2)

    def steps(self, name, **identity) -> StepSection:
        """The section of heating steps ``name`` for these settings, restored if held."""
        return self._section(StepSection, name, {k: int(v) for k, v in identity.items()})

    def counts(self) -> dict:
        """Section name -> finished jobs' results it holds (sections in use and held)."""
        out = {name: int(self._z.count(name, kind)) for name, (kind, _) in self._loaded.items()}
        out.update({name: len(section) for name, section in self._sections.items()})
        return out

    # -- writing ----------------------------------------------------------------------
    def save_if_due(self):
        if time.monotonic() >= self._next_save:
            self.save()

    def save(self):
        """Write every section (those restored but not asked for again are kept too)."""
        t0 = time.monotonic()
        arrays, listing = {}, []
        for name, (kind, identity) in self._loaded.items():
            if name not in self._sections:       # held, not (yet) asked for: keep as is
                prefix = name + "."
                arrays.update({k: v for k, v in self._z.items() if k.startswith(prefix)})
                listing.append({"name": name, "kind": kind, "identity": identity,
                                "count": int(self._z.count(name, kind))})
        for name, section in self._sections.items():
            arrays.update({f"{name}.{k}": v for k, v in section._arrays().items()})
            listing.append({"name": name, "kind": section.kind, "identity": section.identity,
                            "count": len(section)})
        ident = dict(self.identity, seed=np.uint64(self.identity["seed"]))
        with atomic.open_atomic(self.path, "the checkpoint") as fh:
            np.savez(fh, kind=_CHECKPOINT_KIND, sections=json.dumps(listing), **ident,
                     **arrays)
        spent = time.monotonic() - t0
        self._next_save = time.monotonic() + max(CHECKPOINT_EVERY_S, spent / _SAVE_SHARE)

    def remove(self):
        self.path.unlink(missing_ok=True)


class _Arrays(dict):
    """The arrays of a loaded checkpoint, by their names in the file."""

    def count(self, name, kind) -> int:
        key = f"{name}.keys" if kind == "pairs" else f"{name}.steps"
        return len(self[key]) if key in self else 0
