"""Fit the X-alpha exchange parameter of each atom to its Hartree-Fock total energy with SciPy.

`stillpoint.grad` gives the loss and its exact gradient (adjoint through the SCF) for the
shipped workflow workflows/fit-atoms-xalpha.toml; scipy.optimize.minimize does the rest.
The fitted values reproduce Schwarz's alpha_HF (Phys. Rev. B 5, 2466 (1972)). Hartree atomic
units.

    PYTHONPATH=build/python python3 examples/python/scipy_fit_xalpha.py [--short]
"""
import argparse
import pathlib

import numpy as np
from scipy.optimize import minimize

import stillpoint as sp

parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
parser.add_argument("--short", action="store_true", help="a few iterations only (used by the tests)")
args = parser.parse_args()

root = pathlib.Path(__file__).resolve().parents[2]
problem = sp.grad_input(root / "workflows" / "fit-atoms-xalpha.toml")
names = [p.name for p in problem.parameters]
bounds = [(p.lower, p.upper) for p in problem.parameters]


def loss_and_gradient(theta):
    r = sp.grad(problem, theta=theta, threads=2)
    return r["loss"], r["gradient"]


result = minimize(loss_and_gradient, np.asarray(problem.initial_values), jac=True, method="L-BFGS-B",
                  bounds=bounds, options={"maxiter": 3 if args.short else 100, "gtol": 1e-12, "ftol": 1e-15})
for name, alpha in zip(names, result.x):
    print(f"{name:>3}: alpha = {alpha:.6f}")
print(f"loss {result.fun:.3e} hartree^2 after {result.nit} iterations ({result.message})")
