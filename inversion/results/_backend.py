"""The crash-safe sampler backend: emcee's HDF5 backend writing into the result file's ``/mcmc``.

One of the two modules of :mod:`inversion` that open HDF5 files (the other is
:mod:`inversion.results._store`); emcee's backend opens the file itself on every step.
"""

from __future__ import annotations

import logging
import time

import emcee
import numpy as np

from forward import InputError

from ._outputs import is_lock_error

__all__ = ["SafeHDFBackend"]


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

    #: seconds to keep retrying an open refused by another process's file lock
    LOCK_WAIT_S = 30.0

    def open(self, mode="r"):
        start = time.monotonic()
        told = False
        while True:
            try:
                return super().open(mode)
            except OSError as exc:
                if not is_lock_error(exc):
                    raise
                waited = time.monotonic() - start
                if waited > self.LOCK_WAIT_S:
                    raise InputError(
                        f"busy: another program has kept this file open for {waited:.0f} s, "
                        "so the sampler cannot write its next step; close it there. Every "
                        "step written so far is kept: continue with --resume",
                        where=self.filename) from None
                if not told and waited > 2.0:
                    told = True
                    logging.getLogger("sondage").warning(
                        "%s: waiting for another program to close the file", self.filename)
                time.sleep(0.05)

    def _create_slots(self, g, nwalkers):
        if "resume_key" in g:
            return
        g.create_dataset("resume_key", shape=(2, 624), dtype=np.uint32)
        meta = g.create_dataset("resume_meta", shape=(2, 4), dtype=np.float64)
        meta.attrs["columns"] = ["step", "pos", "has_gauss", "cached_gaussian"]
        meta[:, 0] = -1.0
        g.create_dataset("resume_accepted", shape=(2, nwalkers), dtype=np.float64)
        g.attrs["resume_slots"] = ("random state and acceptances after step n in slot n % 2, "
                                   "written and flushed before the counter 'iteration'")

    def reset(self, nwalkers, ndim):
        super().reset(nwalkers, ndim)
        with self.open("a") as f:
            g = f[self.name]
            # the chain and log-posteriors again, with a Fletcher-32 checksum per chunk: bytes
            # damaged on disk then fail loudly on reading instead of entering a resumed chain
            for key, shape in (("chain", (nwalkers, ndim)), ("log_prob", (nwalkers,))):
                del g[key]
                g.create_dataset(key, (0, *shape), maxshape=(None, *shape), dtype=self.dtype,
                                 chunks=(max(1, 4096 // (8 * int(np.prod(shape)))), *shape),
                                 fletcher32=True)
            self._create_slots(g, nwalkers)

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

    def save_step(self, state, accepted):
        self._check(state, accepted)
        with self.open("a") as f:
            g = f[self.name]
            n = int(g.attrs["iteration"])
            previous = self._slot(g)
            total = (np.array(previous[2]) if previous is not None else g["accepted"][...])
            total = total + accepted
            self._create_slots(g, int(g.attrs["nwalkers"]))
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
            f.flush()
            g.attrs.modify("iteration", n + 1)
