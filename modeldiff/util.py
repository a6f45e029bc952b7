"""Small helpers shared by modules that have nothing else in common."""

from __future__ import annotations

import gc
from contextlib import contextmanager
from typing import Iterator


@contextmanager
def paused_gc() -> Iterator[None]:
    """Hold the cyclic garbage collector while a model's many small records are made.

    Building a model allocates hundreds of thousands of objects and no
    reference cycles; the collector would walk them again and again (a third
    of the loading time on a large model). Nested use is harmless. Afterwards
    the objects made are moved to the oldest generation without a walk (the
    first young collection would otherwise walk all of them: 0.03 s after a
    22,000-measure diff); a later full collection still examines them.
    """
    if not gc.isenabled():
        yield
        return
    gc.disable()
    try:
        yield
    finally:
        if gc.get_freeze_count() == 0:  # (a process that froze objects of its own keeps them frozen)
            # what was made meanwhile goes straight to the oldest generation, as if it had survived the
            # young collections, rather than being walked all at once by the next young collection
            gc.freeze()
            gc.unfreeze()
        gc.enable()
