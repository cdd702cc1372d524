"""Sampler checkpoints as an emcee backend: the chain in memory and in an npz file.

:class:`NpzCheckpoint` is emcee's in-memory :class:`emcee.backends.Backend` that can
also write itself -- chain, log-probabilities, acceptance counts, the sampler's random
state and a description of the set-up -- atomically to ``chain.npz`` (numpy, no pickle)
and read itself back, so a run can resume exactly where it was stopped.
"""

from __future__ import annotations

from pathlib import Path

import emcee
import numpy as np

from lensdelay.atomic import atomic_save_npz, load_npz
from lensdelay.errors import InputError

__all__ = ["NpzCheckpoint"]


class NpzCheckpoint(emcee.backends.Backend):
    """An in-memory emcee backend that saves to and resumes from an npz file.

    Parameters
    ----------
    path : path or None
        The checkpoint file (None: memory only).
    seed : int
        The run's seed, recorded and checked on resume.
    setup : str
        What else a resumed run must share (move, prior, coordinates).
    """

    def __init__(self, path, seed: int, setup: str):
        super().__init__()
        self.path = Path(path) if path is not None else None
        self.seed = int(seed)
        self.setup = setup

    def write(self, names=()) -> None:
        """Write the chain so far atomically (nothing without a path)."""
        if self.path is None or not self.initialized:
            return
        key, pos, has_gauss, cached = self.random_state[1:]
        atomic_save_npz(
            self.path,
            chain=self.get_chain(),
            log_prob=self.get_log_prob(),
            accepted=self.accepted,
            seed=self.seed,
            rs_key=key,
            rs_pos=pos,
            rs_has_gauss=has_gauss,
            rs_cached=cached,
            names=np.array(list(names)),
            setup=np.array(self.setup),
        )

    def read(self, walkers: int, ndim: int) -> bool:
        """Load the file into memory if it exists; refuse one from a different run.

        Returns whether anything was loaded.
        """
        if self.path is None or not self.path.exists():
            return False
        saved = load_npz(self.path)
        saved_setup = str(saved.get("setup", "an older lensdelay"))
        chain = saved["chain"]
        if (
            int(saved["seed"]) != self.seed
            or chain.shape[1:] != (walkers, ndim)
            or saved_setup != self.setup
        ):
            raise InputError(
                f"resume found {self.path} from a different run (seed "
                f"{int(saved['seed'])}, shape {chain.shape[1:]}, {saved_setup}), "
                f"got seed {self.seed}, shape {(walkers, ndim)}, {self.setup}"
            )
        self.reset(walkers, ndim)
        self.chain = np.array(chain, dtype=float)
        self.log_prob = np.array(saved["log_prob"], dtype=float)
        self.accepted = np.array(saved["accepted"], dtype=float)
        self.iteration = len(chain)
        self.random_state = (
            "MT19937",
            saved["rs_key"],
            int(saved["rs_pos"]),
            int(saved["rs_has_gauss"]),
            float(saved["rs_cached"]),
        )
        return True
