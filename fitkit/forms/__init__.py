"""Behavioural step-response forms, by plain-words name.

``FORMS`` maps each name to its :class:`~fitkit.forms.base.Form`;
``get_form(name)`` looks one up with a helpful error. The forms, simplest
first (one module each):

* first-order         single real pole, low-pass rise            (first_order.py)
* first-order-decay   single pole high-pass, decays back          (first_order_decay.py)
* two-real-pole       overdamped pole pair, tau1 >= tau2          (two_real_pole.py)
* critically-damped   double real pole, Q = 1/2                   (critically_damped.py)
* underdamped         ringing second order, f0 and Q > 1/2        (underdamped.py)
* second-order        f0 and Q free across every damping          (second_order.py)
* three-, four-, five-real-pole   n real poles, RC ladders        (real_poles.py)
* pole-zero           one real zero and two real poles            (pole_zero.py)
* underdamped-band-pass, two-real-pole-band-pass   RLC voltage across R: rises and
                      returns to the baseline                     (band_pass.py)
* underdamped-zero, underdamped-undershoot, two-real-pole-undershoot   a real zero
                      of either sign on the second order          (second_order_zero.py)

Wrappers that make a Form from any form: ``delayed(form)`` adds a dead time
(dead_time.py; ``get_form("NAME-with-delay")`` for every NAME) and
``pulse_response(form, width)`` the response to a rectangular pulse of given
width (pulse.py).

Helpers: stable_math.py (expm1-based and divided-difference evaluation for
close poles), metrics.py (numerical rise time, overshoot, settling time and
-3 dB bandwidth), shape_measures.py (levels, overshoot and ringing read off
data for the starting guesses), catalogue.py (plain descriptions for
`fitkit forms`).
"""

from __future__ import annotations

from ..errors import OptionError
from .band_pass import TWO_REAL_POLE_BAND_PASS, UNDERDAMPED_BAND_PASS
from .base import Form, ParamSpec
from .critically_damped import CRITICALLY_DAMPED
from .dead_time import DELAY_SUFFIX, delayed
from .first_order import FIRST_ORDER
from .first_order_decay import FIRST_ORDER_DECAY
from .pole_zero import POLE_ZERO
from .real_poles import FIVE_REAL_POLE, FOUR_REAL_POLE, THREE_REAL_POLE, real_pole_form
from .pulse import pulse_response
from .second_order import SECOND_ORDER
from .second_order_zero import TWO_REAL_POLE_UNDERSHOOT, UNDERDAMPED_UNDERSHOOT, UNDERDAMPED_ZERO
from .two_real_pole import TWO_REAL_POLE
from .underdamped import UNDERDAMPED

#: Every form by name, simplest first.
FORMS: dict[str, Form] = {f.name: f for f in (
    FIRST_ORDER, FIRST_ORDER_DECAY, TWO_REAL_POLE, CRITICALLY_DAMPED, UNDERDAMPED, SECOND_ORDER,
    THREE_REAL_POLE, FOUR_REAL_POLE, FIVE_REAL_POLE, POLE_ZERO,
    UNDERDAMPED_BAND_PASS, TWO_REAL_POLE_BAND_PASS,
    UNDERDAMPED_ZERO, UNDERDAMPED_UNDERSHOOT, TWO_REAL_POLE_UNDERSHOOT,
)}
#: Forms made by a wrapper that the automatic choice can try by name, kept apart from FORMS
#: (whose step responses are those of their rational transfer functions): a first-order
#: low-pass driven by a pulse whose width is fitted (an output-only capture of a pulse shorter
#: than the time constant: the output rises while the pulse lasts, then decays).
PULSE_FORMS: dict[str, Form] = {"first-order-pulse": pulse_response(FIRST_ORDER, None)}


def get_form(name: str) -> Form:
    """The form called ``name`` (or "NAME-with-delay": NAME behind a dead time, see
    dead_time.py); OptionError listing the known forms otherwise."""
    if name in FORMS:
        return FORMS[name]
    if name in PULSE_FORMS:
        return PULSE_FORMS[name]
    base = name[:-len(DELAY_SUFFIX)] if name.endswith(DELAY_SUFFIX) else None
    if base in FORMS:
        return delayed(FORMS[base])
    raise OptionError(f"unknown form {name!r}; known forms: {', '.join(FORMS)} (each also as NAME{DELAY_SUFFIX})",
                      hint="run `fitkit forms` to list them")


__all__ = ["Form", "ParamSpec", "FORMS", "PULSE_FORMS", "DELAY_SUFFIX", "get_form", "real_pole_form", "delayed", "pulse_response"]
