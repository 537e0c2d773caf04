"""Two fidelities from Python, on any pair of functions: how much does the cheap one help?

Replace ``high`` and ``low`` by your own pair (points in the unit cube in, one value per point out):
this fits the expensive runs alone and with the cheap runs beside them, and prints the held-out
q2 of both at a few numbers of expensive runs. The pair below is Currin's exponential function and
its low-fidelity form (Xiong, Qian & Wu 2013, as given in Surjanovic & Bingham's library).

Run from the repository root:  python examples/two_fidelity_pair.py
"""
from __future__ import annotations

import numpy as np

from doe.design.plans import maximin_lhs
from doe.surrogate.gp import ResponseSurrogate
from doe.testing.functions import get_pair
from doe.surrogate.twofidelity import TwoFidelitySurrogate

high_fn, low_fn = get_pair("currin")
high, low, d = high_fn.on_unit, low_fn.on_unit, high_fn.dim
CHEAP_RUNS = 30 * d                                   # spread cheap runs (the cheap model also runs at every expensive point)


def q2(model, U, y):
    """Held-out predictivity: 1 - mean squared error / variance."""
    return 1 - np.mean((model.predict(U) - y) ** 2) / np.var(y)


def main() -> None:
    U_test = np.random.default_rng(7).random((2000, d))
    y_test = high(U_test)
    print(f"{'expensive runs':>15} {'q2 alone':>9} {'q2 with cheap':>14} {'rho':>6}")
    for n in (4, 6, 8, 12):
        U_high = maximin_lhs(n, d, seed=n)
        U_low = np.vstack([maximin_lhs(CHEAP_RUNS, d, seed=1), U_high])   # a nested plan
        alone = ResponseSurrogate(seed=0).fit(U_high, high(U_high))
        both = TwoFidelitySurrogate(seed=0, compare=False).fit(U_low, low(U_low), U_high, high(U_high))
        print(f"{n:>15} {q2(alone, U_test, y_test):>9.3f} {q2(both, U_test, y_test):>14.3f} {both.rho_:>6.3f}")


if __name__ == "__main__":
    main()
