"""The seed rule: every random draw's seed follows from the policy seed and names, never positions.

Two functions, used by every stage that draws random numbers (subsamples,
permutations, random features, FastICA starts):

- :func:`working_seed` maps the policy seed a user gives (any whole number
  of 0 or more) to the seed the generators get;
- :func:`derived_seed` gives one draw its own seed from the working seed
  and the names involved, so reordering the columns leaves every draw as it
  was.
"""

from __future__ import annotations

import zlib

import numpy as np

SEED_LIMIT = 2**32
"""Random generators (FastICA's among them) take seeds below this."""


def working_seed(seed: int) -> int:
    """The seed the random generators get for a policy seed.

    Seeds below ``SEED_LIMIT`` are used as they are, so their reports never
    change; a larger one is mapped through numpy's SeedSequence to a 32-bit
    seed, so any whole number of 0 or more can be given.
    """
    if seed < SEED_LIMIT:
        return seed
    return int(np.random.SeedSequence(seed).generate_state(1)[0])


def derived_seed(seed: int, *labels: str) -> int:
    """A seed that depends on the names involved, not on column positions.

    Reordering columns therefore leaves every subsample and permutation as it was.
    """
    text = "\x1f".join(sorted(labels))
    return int(np.random.SeedSequence([seed & 0xFFFFFFFF, zlib.crc32(text.encode())]).generate_state(1)[0])
