"""Small helpers shared by modules that have nothing else in common."""

from __future__ import annotations

import gc
import math
from contextlib import contextmanager
from decimal import Decimal
from typing import Any, Iterator

FLOAT_TOLERANCE = 1e-9  # relative: two floating-point values this close are the same number


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


def is_number(value: Any) -> bool:
    return isinstance(value, (int, float, Decimal)) and not isinstance(value, bool)


def same_value(a: Any, b: Any) -> bool:
    """Whether two evaluated values are the same number: exact, except floating point within FLOAT_TOLERANCE."""
    if a is None or b is None:
        return a is None and b is None
    if is_number(a) and is_number(b) and (isinstance(a, float) or isinstance(b, float)):
        a, b = float(a), float(b)
        if math.isnan(a) or math.isnan(b):
            return math.isnan(a) and math.isnan(b)
        return math.isclose(a, b, rel_tol=FLOAT_TOLERANCE, abs_tol=1e-12)
    return a == b
