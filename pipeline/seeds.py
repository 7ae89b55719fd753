"""Named random streams from the experiment's one SeedSequence tree.

Each stage draws from its own child of SeedSequence(seed), so adding draws to one
stage never shifts the numbers another stage sees. Each stream is consumed by one
place only; a stage needing several independent draws spawns children of its stream.
"""
from __future__ import annotations

import numpy as np

# The numbers are spawn keys: never reuse or renumber one, or old results change.
STREAMS = {
    "split": 1,              # train/test rows
    "folds": 2,              # CV folds
    "features": 3,           # random feature maps (one spawned child per map)
    "test_intervals": 4,     # bootstrap intervals of held-out metrics
    "resampling": 5,         # stability resamples
    "nested": 7,             # nested-CV outer and inner folds
    "paired_difference": 8,  # paired bootstrap of the difference between families
    "scenario": 9,           # synthetic scenario data (under the scenario's own data.seed)
    "landmarks": 10,         # Nyström landmarks of the ridge-type family's large-n route
}


def seed_sequence(seed: int, stream: str) -> np.random.SeedSequence:
    return np.random.SeedSequence(seed, spawn_key=(STREAMS[stream],))


def generator(seed: int, stream: str) -> np.random.Generator:
    return np.random.default_rng(seed_sequence(seed, stream))


def int_seed(seed: int, stream: str) -> int:
    return int(seed_sequence(seed, stream).generate_state(1)[0] % (2**31 - 1))


def child_int_seeds(seed: int, stream: str, n: int) -> list[int]:
    """n independent integer seeds spawned from one stream (e.g. one per feature map)."""
    return [int(c.generate_state(1)[0] % (2**31 - 1)) for c in seed_sequence(seed, stream).spawn(n)]
