"""Fit a 1D external potential, node by node, to a target density with torch.optim.LBFGS.

Our own scenario: two electrons in a soft-Coulomb well (charge 2) plus a Gaussian dip make a
target density; starting from the bare well, the potential on every grid node is fitted
until the Kohn–Sham density reproduces the target. Each gradient is one adjoint solve
through the converged SCF, whatever the number of nodes. Hartree atomic units.

    PYTHONPATH=build/python python3 examples/python/fit_potential_lbfgs.py [--short]
"""
import argparse

import torch

import stillpoint.torch as spt

parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
parser.add_argument("--short", action="store_true", help="a few iterations only (used by the tests)")
args = parser.parse_args()

system = {
    "name": "well",
    "kind": "line",
    "xc": ["lda_x_1d_soft", "lda_c_1d_csc"],
    "nucleus": [{"charge": 2.0, "position": 0.0, "softening": 1.0}],
    "grid": {"preset": "coarse", "half_width": 10.0},
}
# The target: the same system with a Gaussian dip of depth 0.2 Ha at x = 1 bohr.
target_system = dict(system, potential=[{"kind": "gaussian", "depth": 0.2, "center": 1.0, "width": 0.8}])
target_ks = spt.KohnSham(target_system, [{"kind": "gaussian", "index": 0, "fields": ["depth"]}])
_, target, _ = target_ks(target_ks.initial())

ks = spt.KohnSham(system, [{"kind": "grid_potential"}])
theta = ks.initial().requires_grad_()
# A small smoothness penalty picks the smooth potential among those with nearly equal densities.
smooth = 1e-6
opt = torch.optim.LBFGS([theta], lr=1.0, max_iter=5 if args.short else 200, history_size=30,
                        tolerance_grad=1e-12, tolerance_change=1e-15, line_search_fn="strong_wolfe")
history = []


def closure():
    opt.zero_grad()
    _, n, _ = ks(theta)
    loss = (ks.weights * (n - target.detach()) ** 2).sum() + smooth * ((theta[1:] - theta[:-1]) ** 2).sum()
    loss.backward()
    history.append(float(loss))
    return loss


opt.step(closure)
_, n, _ = ks(theta)
error = float((ks.weights * (n - target).abs()).sum())
print(f"evaluations: {len(history)}; loss {history[0]:.3e} -> {history[-1]:.3e}")
print(f"integral |n - n_target| = {error:.3e} electrons (start: "
      f"{float((ks.weights * (ks(ks.initial())[1] - target).abs()).sum()):.3e})")
assert history[-1] < history[0]
