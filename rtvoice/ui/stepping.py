"""One key press worth of change for each kind of parameter."""

from __future__ import annotations

import math
from typing import Any

from rtvoice.engine import Param

LINEAR_STEPS = 100  # a coarse step is 1 % of the range
LOG_STEP_RATIO = 2 ** (1 / 6)  # a coarse step on a log scale: a sixth of an octave
FINE = 10  # a fine step is a tenth of a coarse one


def stepped(param: Param, value: Any, direction: int, fine: bool = False) -> Any:
    """The value one step up (direction > 0) or down, held inside the range.

    Choices cycle; shapes have no step (they are typed).
    """
    up = direction > 0
    if param.kind == "choice" or param.choices:
        choices = list(param.choices)
        i = choices.index(value) if value in choices else 0
        return choices[(i + (1 if up else -1)) % len(choices)]
    if param.kind not in ("int", "float"):
        raise ValueError(f"{param.name} has no step: type a value instead")
    assert param.low is not None and param.high is not None  # every int and float parameter has a range
    if param.kind == "int":
        return int(min(max(value + (1 if up else -1), param.low), param.high))
    v = float(value)
    if param.log_scale and v > 0:
        ratio = LOG_STEP_RATIO ** (1 / FINE if fine else 1)
        new = v * ratio if up else v / ratio
        if not up and new < max(param.low, 1e-300):
            new = param.low
    else:
        if param.log_scale and v <= 0 and up:
            base = param.high * 1e-4 if param.low == 0 else param.low
            return min(base, param.high)
        step = (param.high - param.low) / LINEAR_STEPS / (FINE if fine else 1)
        new = v + step if up else v - step
        new = param.low + round((new - param.low) / step) * step  # on the grid: values read cleanly
    new = min(max(new, param.low), param.high)
    return float(f"{new:.6g}") if math.isfinite(new) else v
