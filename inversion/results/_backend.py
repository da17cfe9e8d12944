"""The crash-safe sampler backend: emcee's HDF5 backend writing into the result file's
``/mcmc``, and the compaction of a finished file's chain.

One of the two modules of :mod:`inversion` that open HDF5 files (the other is
:mod:`inversion.results._store`); emcee's backend opens the file itself on every step.

Storage of the chain
    The chain and its log-posteriors are stored in float32 (:data:`CHAIN_DTYPE`): 7 decimal
    digits, far finer than any posterior width, at half the size.  While a run writes, each
    step's row goes into its own uncompressed chunk, written in place (no step moves data
    already on disk).  When a run ends, :func:`compact_result` rewrites the file with the
    chain in large compressed chunks (gzip with byte shuffling, a checksum per chunk) and
    swaps it into place; :func:`expand_result` does the reverse before a resumed run appends
    to it.  The values are the same bits in both layouts.  What a resumed chain continues
    from is not the float32 chain but the last step's float64 positions and log-posteriors,
    kept with the random state in the step-tagged resume slots, so a resumed chain is bit for
    bit the uninterrupted one.
"""

from __future__ import annotations

import math
import os
from pathlib import Path

import emcee
import h5py
import numpy as np


from ._outputs import waiting_for_lock

__all__ = ["SafeHDFBackend", "CHAIN_DTYPE", "compact_result", "expand_result",
           "discard_unstarted"]

#: storage type of ``/mcmc/chain`` and ``/mcmc/log_prob`` in new files
CHAIN_DTYPE = np.float32
#: size (bytes, before compression) of a compacted chain's chunks: the default HDF5 chunk cache
_COMPACT_CHUNK_BYTES = 1 << 20
#: size of a writing chain's chunks, one or a few steps each
_RUN_CHUNK_BYTES = 4096


class SafeHDFBackend(emcee.backends.HDFBackend):
    """emcee's HDF5 backend, with each step's resume state written so that a crash at any
    moment leaves the last complete step resumable, bit for bit.

    emcee's own ``save_step`` updates the random state and the acceptance counts before the
    step counter in the same write; a process killed between the two leaves a random state one
    step ahead of the stored chain (the resumed chain then differs from an uninterrupted one)
    and the acceptances counted twice.  Here the random state and the cumulative acceptances
    go into one of two fixed-size slots (``resume_key``, ``resume_meta``,
    ``resume_accepted``: contiguous datasets allocated at reset, so writing them changes no
    file structure), the slot of step ``n`` being ``n % 2`` and tagged with ``n``; the file is
    flushed, and only then is the counter (``iteration``) advanced.  Readers take the slot
    whose tag equals the counter, so a step is either wholly in the file or not at all.

    Files written by plain emcee (no slots) are read and continued as before.  Opening the
    file is retried for a while when another process holds an HDF5 file lock (a reader
    looking at a running inversion), instead of failing the run.
    """

    #: seconds to keep retrying an open refused by another process's file lock (None: the
    #: writers' common wait, ``inversion.results._outputs.LOCK_WAIT_S``)
    LOCK_WAIT_S = None

    #: ``(n, totals)``: the cumulative acceptances after step ``n``, kept by the object that
    #: wrote that step (None: read them from the file)
    _accepted_after = None

    def open(self, mode="r"):
        return waiting_for_lock(lambda: super(SafeHDFBackend, self).open(mode), self.filename,
                                wait_s=self.LOCK_WAIT_S,
                                doing="write the sampler's next step (every step written so "
                                      "far is kept: continue with --resume)")

    def _create_slots(self, g, nwalkers, ndim):
        if "resume_key" not in g:
            g.create_dataset("resume_key", shape=(2, 624), dtype=np.uint32)
            meta = g.create_dataset("resume_meta", shape=(2, 4), dtype=np.float64)
            meta.attrs["columns"] = ["step", "pos", "has_gauss", "cached_gaussian"]
            meta[:, 0] = -1.0
            g.create_dataset("resume_accepted", shape=(2, nwalkers), dtype=np.float64)
        if "resume_coords" not in g:
            # the last step's positions and log-posteriors in full precision (the chain itself
            # is float32), tagged with their step like the random state
            g.create_dataset("resume_coords", shape=(2, nwalkers, ndim), dtype=np.float64)
            g.create_dataset("resume_log_prob", shape=(2, nwalkers), dtype=np.float64)
            tags = g.create_dataset("resume_coords_step", shape=(2,), dtype=np.float64)
            tags[:] = -1.0
        if "resume_slots" not in g.attrs:  # written once, not at every step
            g.attrs["resume_slots"] = ("random state, acceptances, positions and "
                                       "log-posteriors after step n in slot n % 2, written and "
                                       "flushed before the counter 'iteration'")

    def reset(self, nwalkers, ndim):
        self._accepted_after = None
        super().reset(nwalkers, ndim)
        with self.open("a") as f:
            g = f[self.name]
            # the chain and log-posteriors again, in float32, with a Fletcher-32 checksum per
            # chunk: bytes damaged on disk then fail loudly on reading instead of entering a
            # resumed chain
            for key in ("chain", "log_prob"):
                shape = g[key].shape[1:]
                del g[key]
                g.create_dataset(key, (0, *shape), **_run_layout(shape, CHAIN_DTYPE))
            self._create_slots(g, nwalkers, ndim)

    def _slot(self, g):
        """(key, meta, accepted) of the slot matching the counter, or None without slots."""
        if "resume_key" not in g:
            return None
        n = int(g.attrs["iteration"])
        meta = g["resume_meta"][()]
        if np.all(meta[:, 0] < 0):  # slots added to a plain emcee file, never written
            return None
        for s in (n % 2, 1 - n % 2):
            if int(meta[s, 0]) == n:
                return g["resume_key"][s], meta[s], g["resume_accepted"][s]
        if n == 0:
            return None
        raise OSError(f"the sampler state of step {n} is missing from the result file "
                      "(damaged file)")

    @property
    def random_state(self):
        with self.open() as f:
            slot = self._slot(f[self.name])
        if slot is None:
            return super().random_state
        key, meta, _ = slot
        return ("MT19937", np.asarray(key, dtype=np.uint32), int(meta[1]), int(meta[2]),
                float(meta[3]))

    @property
    def accepted(self):
        with self.open() as f:
            g = f[self.name]
            slot = self._slot(g)
            if slot is None:
                return g["accepted"][...]
            return np.array(slot[2])

    @staticmethod
    def _check_step(g, state, accepted) -> None:
        """emcee's checks of a step against the stored shape and blobs, read from the group
        already open (emcee's own ``_check`` opens the file four more times per step, about
        half the cost of writing one)."""
        nwalkers, ndim = int(g.attrs["nwalkers"]), int(g.attrs["ndim"])
        has_blobs = bool(g.attrs["has_blobs"])
        blobs = state.blobs
        if (has_blobs and blobs is None) or (
                blobs is not None and not has_blobs and int(g.attrs["iteration"]) > 0):
            raise ValueError("inconsistent use of blobs")
        if state.coords.shape != (nwalkers, ndim):
            raise ValueError(f"invalid coordinate dimensions; expected {(nwalkers, ndim)}")
        if state.log_prob.shape != (nwalkers,):
            raise ValueError(f"invalid log probability size; expected {nwalkers}")
        if blobs is not None and not has_blobs:
            raise ValueError("unexpected blobs")
        if blobs is not None and len(blobs) != nwalkers:
            raise ValueError(f"invalid blobs size; expected {nwalkers}")
        if accepted.shape != (nwalkers,):
            raise ValueError(f"invalid acceptance size; expected {nwalkers}")

    def save_step(self, state, accepted):
        with self.open("a") as f:
            g = f[self.name]
            self._check_step(g, state, accepted)
            n = int(g.attrs["iteration"])
            cached = self._accepted_after
            if cached is not None and cached[0] == n:  # this object wrote step n itself
                total = cached[1]
            else:
                previous = self._slot(g)
                total = (np.array(previous[2]) if previous is not None
                         else g["accepted"][...])
            total = total + accepted
            self._create_slots(g, int(g.attrs["nwalkers"]), int(g.attrs["ndim"]))
            g["chain"][n, :, :] = state.coords
            g["log_prob"][n, :] = state.log_prob
            if state.blobs is not None:
                g["blobs"][n, :] = state.blobs
            g["accepted"][:] = total  # emcee's own copy, for plain emcee readers
            name, key, pos, has_gauss, cached = state.random_state
            s = (n + 1) % 2
            g["resume_key"][s] = np.asarray(key, dtype=np.uint32)
            g["resume_accepted"][s] = total
            g["resume_meta"][s] = [n + 1, pos, has_gauss, cached]
            g["resume_coords"][s] = np.asarray(state.coords, dtype=np.float64)
            g["resume_log_prob"][s] = np.asarray(state.log_prob, dtype=np.float64)
            g["resume_coords_step"][s] = n + 1
            f.flush()
            g.attrs.modify("iteration", n + 1)
        self._accepted_after = (n + 1, total)

    def get_value(self, name, flat=False, thin=1, discard=0):
        """As emcee's, in float64 whatever the stored type."""
        value = super().get_value(name, flat=flat, thin=thin, discard=discard)
        if name in ("chain", "log_prob") and value is not None:
            value = np.asarray(value, dtype=np.float64)
        return value

    def get_last_sample(self):
        """The state to continue from: the last step's float64 positions and log-posteriors
        and the random state, from the resume slot tagged with the counter (files written
        before the slots held positions: the chain's last row)."""
        coords = log_prob = None
        with self.open() as f:
            g = f[self.name]
            n = int(g.attrs["iteration"])
            if n > 0 and "resume_coords" in g:
                tags = g["resume_coords_step"][()]
                for slot in (n % 2, 1 - n % 2):
                    if int(tags[slot]) == n:
                        coords = np.array(g["resume_coords"][slot])
                        log_prob = np.array(g["resume_log_prob"][slot])
                        break
        if coords is None:
            return super().get_last_sample()
        return emcee.State(coords, log_prob=log_prob, random_state=self.random_state)


# ----------------------------------------------------------------------------------------------
# the chain's two layouts
def _row_layout(shape, dtype, chunk_bytes: int, steps: int | None = None) -> dict:
    row = int(np.dtype(dtype).itemsize * max(1, int(np.prod(shape))))
    rows = max(1, chunk_bytes // row)
    if steps is not None:  # a power of two, no larger than the steps stored need
        rows = 1 << int(math.log2(rows))
        rows = min(rows, 1 << max(0, math.ceil(math.log2(max(steps, 1)))))
    return dict(maxshape=(None, *shape), dtype=dtype, chunks=(rows, *shape), fletcher32=True)


def _run_layout(shape, dtype, steps=None) -> dict:
    """Uncompressed chunks of one or a few steps: each step is written in place."""
    return _row_layout(shape, dtype, _RUN_CHUNK_BYTES)


def _compact_layout(shape, dtype, steps=None) -> dict:
    """Large chunks, byte-shuffled and gzip-compressed (level 9: about 4 % smaller than level 4
    for a chain, once per run)."""
    return dict(_row_layout(shape, dtype, _COMPACT_CHUNK_BYTES, steps=steps or 1),
                compression="gzip", compression_opts=9, shuffle=True)


def _fsync(path) -> None:
    fd = os.open(path, os.O_RDONLY)
    try:
        os.fsync(fd)
    finally:
        os.close(fd)


#: numeric datasets outside the chain with at least this many values are compressed too when a
#: file is compacted (posterior draws, derived draws): lossless, read back unchanged
_COMPRESS_OTHERS_FROM = 4096


def _copy_group(src, dst, compress: bool) -> None:
    """Copy a group's attributes and members; with ``compress``, large numeric datasets are
    written again gzip-compressed with byte shuffling (and a checksum per chunk)."""
    for k, v in src.attrs.items():
        dst.attrs[k] = v
    for key in src:
        link = src.get(key, getlink=True)
        item = src[key] if not isinstance(link, (h5py.ExternalLink, h5py.SoftLink)) else None
        if isinstance(item, h5py.Group):
            _copy_group(item, dst.create_group(key), compress)
        elif (compress and isinstance(item, h5py.Dataset) and item.dtype.kind in "fiu"
              and item.size >= _COMPRESS_OTHERS_FROM and item.compression is None):
            out = dst.create_dataset(key, data=item[()], compression="gzip",
                                     compression_opts=4, shuffle=True, fletcher32=True)
            for a, v in item.attrs.items():
                out.attrs[a] = v
        else:
            src.copy(key, dst, name=key)


def _rewrite(path, layout, *, name: str = "mcmc", compress_others: bool = False) -> None:
    """Copy a result file with ``/<name>/chain`` and ``log_prob`` in another layout into a
    file beside it, then swap it into place (a crash leaves the original untouched)."""
    path = Path(path)
    tmp = path.with_name(path.name + ".rewrite")
    try:
        with _open_waiting(path, "r") as src, h5py.File(tmp, "w") as dst:
            for key, value in src.attrs.items():
                dst.attrs[key] = value
            for key in src:
                if key != name:
                    if isinstance(src[key], h5py.Group):
                        _copy_group(src[key], dst.create_group(key), compress_others)
                    else:
                        src.copy(key, dst, name=key)
                    continue
                g_src = src[key]
                g = dst.create_group(key)
                for k, v in g_src.attrs.items():
                    g.attrs[k] = v
                n = int(g_src.attrs.get("iteration", 0))
                for k in g_src:
                    d = g_src[k]
                    if k not in ("chain", "log_prob") or not isinstance(d, h5py.Dataset):
                        g_src.copy(d, g, name=k)
                        continue
                    out = g.create_dataset(k, d.shape, **layout(d.shape[1:], d.dtype, n))
                    step = max(1, out.chunks[0])
                    for i in range(0, n, step):  # the steps written; rows above stay unwritten
                        out[i:min(n, i + step)] = d[i:min(n, i + step)]
                    for a, v in d.attrs.items():
                        out.attrs[a] = v
        _fsync(tmp)
        os.replace(tmp, path)
        _fsync(path.parent)
    except BaseException:
        try:
            tmp.unlink()
        except OSError:
            pass
        raise


def _is_compact(path, name: str = "mcmc") -> bool:
    with _open_waiting(path, "r") as f:
        return name in f and "chain" in f[name] and f[name]["chain"].compression is not None


def compact_result(path, *, name: str = "mcmc") -> None:
    """Rewrite a result file whose run has ended with its chain compressed, and its other large
    numeric datasets too (same values)."""
    _rewrite(path, _compact_layout, name=name, compress_others=True)


def expand_result(path, *, name: str = "mcmc") -> None:
    """Before a resumed run appends to a compacted chain: back to one uncompressed chunk per
    step or so (same values), so that no step rewrites compressed data."""
    if _is_compact(path, name):
        _rewrite(path, _run_layout, name=name)


def discard_unstarted(path, *, name: str = "mcmc") -> None:
    """Remove a new result file that never got a step (a run that failed at its start)."""
    path = Path(path)
    try:
        with h5py.File(path, "r") as f:
            steps = int(f[name].attrs.get("iteration", 0)) if name in f else 0
    except (OSError, KeyError):
        steps = 0
    if steps == 0:
        try:
            path.unlink()
        except OSError:
            pass


def _open_waiting(path, mode: str):
    """``h5py.File(path, mode)``, waiting while another program holds the file."""
    return waiting_for_lock(lambda: h5py.File(path, mode), path, doing="rewrite it")
