"""Named random streams from the experiment's one SeedSequence tree.

Each stage draws from its own child of SeedSequence(seed), so adding draws to one
stage never shifts the numbers another stage sees.
"""
from __future__ import annotations

import numpy as np

STREAMS = {"split": 1, "folds": 2, "features": 3, "bootstrap": 4, "resampling": 5, "tasks": 6, "nested": 7}


def seed_sequence(seed: int, stream: str) -> np.random.SeedSequence:
    return np.random.SeedSequence(seed, spawn_key=(STREAMS[stream],))


def generator(seed: int, stream: str) -> np.random.Generator:
    return np.random.default_rng(seed_sequence(seed, stream))


def int_seed(seed: int, stream: str) -> int:
    return int(seed_sequence(seed, stream).generate_state(1)[0] % (2**31 - 1))
