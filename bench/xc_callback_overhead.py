"""Cost of an exchange-correlation term written in Python against the built-in model family of
the same form: wall time per SCF iteration (cold solves, median of --repeat), and of one
adjoint gradient (SCF from a warm start, kernel, parameter Jacobian). Hartree atomic units.

    PYTHONPATH=build/python OPENBLAS_NUM_THREADS=1 OMP_NUM_THREADS=1 python3 bench/xc_callback_overhead.py

The same functional each time (the tests check that the energies agree to 1e-10 hartree), so
the ratio is the price of the callback: NumPy conversion, the GIL, the torch graph and autograd.
"""
import argparse
import math
import statistics
import time

import numpy as np
import torch

import stillpoint as sp

parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
parser.add_argument("--repeat", type=int, default=15)
args = parser.parse_args()
torch.set_num_threads(1)

DIRAC = -0.75 * (3.0 / math.pi) ** (1.0 / 3.0)
RATIONAL = [0.03, 0.01, 0.2, 0.05, 0.01]


class RationalC(torch.nn.Module):
    def __init__(self):
        super().__init__()
        self.p = torch.nn.Parameter(torch.tensor(RATIONAL, dtype=torch.float64))

    def forward(self, rs):
        a1, a2, b1, b2, b3 = self.p
        return -(a1 * rs + a2 * rs ** 2) / (1 + b1 * rs + b2 * rs ** 2 + b3 * rs ** 3)


class XAlpha(torch.nn.Module):
    def __init__(self):
        super().__init__()
        self.alpha = torch.nn.Parameter(torch.tensor(0.7, dtype=torch.float64))

    def forward(self, n):
        return 1.5 * self.alpha * DIRAC * n ** (4 / 3)


def numpy_xalpha(pts):
    n = pts.rho[:, 0]
    a = pts.theta[0]
    f, df = 1.5 * DIRAC * n ** (4 / 3), 2 * DIRAC * np.cbrt(n)
    out = {"e": a * f, "vrho": a * df[:, None]}
    if pts.order >= 2:
        out["v2rho2"] = (a * (2 / 3) * DIRAC * n ** (-2 / 3))[:, None]
    if pts.parameter_derivatives:
        out.update(de=f[None, :], dvrho=df[None, :, None])
    return out


CASES = [
    ("1D He, rational_c_1d", {"name": "He", "kind": "line", "nucleus": [{"charge": 2.0}], "grid": {"preset": "coarse"}},
     ["lda_x_1d_soft", "model:rational_c_1d"], {"model:rational_c_1d": RATIONAL},
     {"torch": sp.xc.torch_term("bench_rational", RationalC(), variables=("rs",), geometry="line")}),
    ("Be atom, xalpha", {"name": "Be", "kind": "atom", "element": "Be"},
     ["model:xalpha", "lda_c_pw"], {"model:xalpha": [0.7]},
     {"torch": sp.xc.torch_term("bench_xalpha", XAlpha(), variables=("n",), per_volume=True),
      "numpy": sp.xc.numpy_term("bench_xalpha_np", numpy_xalpha, parameters={"alpha": 0.7})}),
]


def per_iteration(system):
    times = []
    for _ in range(args.repeat):
        t0 = time.perf_counter()
        s = sp.solve(system=system)
        times.append((time.perf_counter() - t0) / s.iterations)
    return statistics.median(times), s.iterations, len(s.nodes)


def gradient_time(system, term):
    inp = sp.grad_input(system=[system], parameter=[{"kind": "xc_parameter", "term": term}],
                        loss=[{"kind": "eigenvalue", "system": system["name"], "state": "homo", "target": -0.5}])
    sp.grad(inp)
    times = []
    for _ in range(max(3, args.repeat // 3)):
        t0 = time.perf_counter()
        sp.grad(inp)
        times.append(time.perf_counter() - t0)
    return statistics.median(times)


print(f"{'case':24s} {'term':8s} {'nodes':>5s} {'iter':>4s} {'ms/iteration':>12s} {'ratio':>6s} {'grad ms':>8s} {'ratio':>6s}")
for label, base, xc, params, terms in CASES:
    builtin = dict(base, xc=xc, xc_parameters=params)
    t_ref, it, nodes = per_iteration(builtin)
    g_ref = gradient_time(builtin, 1 if base["kind"] == "line" else 0)
    print(f"{label:24s} {'built-in':8s} {nodes:5d} {it:4d} {1e3 * t_ref:12.3f} {1.0:6.2f} {1e3 * g_ref:8.2f} {1.0:6.2f}")
    for kind, term in terms.items():
        system = dict(base, xc=[term.label if x.startswith("model:") else x for x in xc])
        t, it, nodes = per_iteration(system)
        g = gradient_time(system, term.label)
        print(f"{'':24s} {kind:8s} {nodes:5d} {it:4d} {1e3 * t:12.3f} {t / t_ref:6.2f} {1e3 * g:8.2f} {g / g_ref:6.2f}")
