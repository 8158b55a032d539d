"""Train a small neural correlation term for 1D two-electron ions against exact references.

Our own scenario: two soft-Coulomb electrons (softening 1 bohr) on a nucleus of charge Z. The
package's `exact` solver gives the exact total energy and density of each ion; the Kohn–Sham
model is exact-exchange-free 1D LDA exchange (lda_x_1d_soft) plus a network eps_c(r_s, s^2)
(hartree per particle) registered with stillpoint.xc.torch_term. The network's weights are
the parameters of the stillpoint.torch.KohnSham function, so every gradient is one adjoint
solve through each converged SCF; torch.optim.LBFGS trains them. Some ions are held back as a
validation set. Hartree atomic units (energies in hartree, lengths in bohr).

Writes loss_curves.csv (iteration, training and validation loss) and, when matplotlib is
installed (Debian: python3-matplotlib), loss_curves.png into --output.

    PYTHONPATH=build/python python3 examples/python/train_neural_correlation.py [--short] [--output DIR]
"""
import argparse
import csv
import math
import os
import time

import numpy as np
import torch

import stillpoint as sp
import stillpoint.torch as spt

parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
parser.add_argument("--short", "--quick", action="store_true", help="fewer ions and iterations (used by the tests)")
parser.add_argument("--iterations", type=int, default=None, help="LBFGS iterations (default 25, short: 6)")
parser.add_argument("--output", default="neural-correlation", help="folder for the loss curves (default: %(default)s)")
args = parser.parse_args()
start = time.perf_counter()
torch.manual_seed(0)

GRID = {"degree": 6, "element_size": 1.0, "half_width": 10.0}
if args.short:
    train_z, valid_z = [1.25, 2.0, 3.0], [1.5, 2.5]
else:
    train_z, valid_z = [1.0, 1.25, 1.5, 2.0, 2.5, 3.0, 4.0], [1.125, 1.75, 2.25, 3.5]
iterations = args.iterations if args.iterations is not None else (6 if args.short else 25)


def ion(z):
    return {"name": f"Z{z:g}".replace(".", "_"), "kind": "line", "charge": z - 2.0,
            "nucleus": [{"charge": z, "position": 0.0, "softening": 1.0}], "grid": GRID}


# Exact references on the grid the Kohn–Sham solves use (same nodes, same weights).
reference = {}
for r in sp.exact(system=[ion(z) for z in train_z + valid_z], exact={"triplet": False}):
    reference[r["name"]] = (r["energy"]["total"], torch.from_numpy(np.asarray(r["density"])[1:-1].copy()))


class Correlation(torch.nn.Module):
    """eps_c(r_s, s^2) <= 0 with bounded inputs; e = n eps_c -> 0 in the tails."""

    def __init__(self, hidden=6):
        super().__init__()
        self.net = torch.nn.Sequential(torch.nn.Linear(2, hidden), torch.nn.Tanh(), torch.nn.Linear(hidden, 1)).double()
        with torch.no_grad():  # start near a weak correlation, -0.02 Ha per particle
            self.net[2].weight.mul_(0.1)
            self.net[2].bias.fill_(-3.0)

    def forward(self, rs, s2):
        x = torch.stack([rs / (1.0 + rs), s2 / (1.0 + s2)], 1)
        return -0.4 * torch.nn.functional.softplus(self.net(x))[:, 0]


term = sp.xc.torch_term("neural_c", Correlation(), variables=("rs", "s2"), geometry="line")
print(f"{term.label}: {len(term.parameter_names)} parameters; training on Z = {train_z}, validating on Z = {valid_z}")
scf = {"potential_tolerance": 1e-10, "energy_tolerance": 1e-11, "eigenvalue_tolerance": 1e-10, "max_iterations": 300}
models = {}
for z in train_z + valid_z:
    s = dict(ion(z), xc=["lda_x_1d_soft", term.label])
    models[s["name"]] = spt.KohnSham(s, [term.parameter()], scf=scf)
train = [ion(z)["name"] for z in train_z]
valid = [ion(z)["name"] for z in valid_z]
# Loss per ion: (E - E_exact)^2 in hartree^2 plus DENSITY_WEIGHT * sum_k W_k (n_k - n_exact,k)^2,
# the squared L2 distance of the densities (electrons^2/bohr, taken as a number). The density
# term keeps the network from buying energies with wrong densities.
DENSITY_WEIGHT = 1.0


def loss_of(names, theta):
    total = 0.0
    for name in names:
        ks = models[name]
        e_ref, n_ref = reference[name]
        energy, density, _ = ks(theta)
        total = total + (energy - e_ref) ** 2 + DENSITY_WEIGHT * (ks.weights * (density - n_ref) ** 2).sum()
    return total / len(names)


def energy_errors(names, theta):
    with torch.no_grad():
        return [1e3 * (float(models[n](theta)[0]) - reference[n][0]) for n in names]


theta = torch.from_numpy(term.initial()).requires_grad_()
before = energy_errors(train + valid, theta)
opt = torch.optim.LBFGS([theta], lr=1.0, max_iter=1, history_size=20, line_search_fn="strong_wolfe")
rows = []


def closure():
    opt.zero_grad()
    loss = loss_of(train, theta)
    loss.backward()
    return loss


for it in range(iterations + 1):
    if it > 0:
        opt.step(closure)
    with torch.no_grad():
        t_loss, v_loss = float(loss_of(train, theta)), float(loss_of(valid, theta))
    if not (math.isfinite(t_loss) and math.isfinite(v_loss)):
        raise SystemExit("the loss is not finite; lower the learning rate or start the network elsewhere")
    rows.append((it, t_loss, v_loss))
    print(f"iteration {it:3d}: training loss {t_loss:.4e}, validation loss {v_loss:.4e}")

term.assign(theta.detach().numpy())  # later inputs using the term start from the trained network
after = energy_errors(train + valid, theta)
print("total-energy error (mHa), before -> after training:")
for name, b, a in zip(train + valid, before, after):
    print(f"  {name:8s} {'train' if name in train else 'valid'}  {b:8.2f} -> {a:8.2f}")

os.makedirs(args.output, exist_ok=True)
csv_path = os.path.join(args.output, "loss_curves.csv")
with open(csv_path, "w", newline="") as f:
    w = csv.writer(f)
    w.writerow(["iteration", "training_loss", "validation_loss"])  # hartree^2 + electrons^2/bohr, see DENSITY_WEIGHT
    w.writerows((i, f"{t:.10e}", f"{v:.10e}") for i, t, v in rows)
try:
    import matplotlib

    matplotlib.use("Agg")
    import matplotlib.pyplot as plt
except ImportError:
    print(f"wrote {csv_path}; matplotlib is not installed (Debian: python3-matplotlib), so no plot")
else:
    fig, ax = plt.subplots(figsize=(5, 3.5))
    ax.semilogy([r[0] for r in rows], [r[1] for r in rows], "o-", label="training")
    ax.semilogy([r[0] for r in rows], [r[2] for r in rows], "s--", label="validation (held back)")
    ax.set_xlabel("LBFGS iteration")
    ax.set_ylabel("loss (Ha$^2$ + density L2$^2$)")
    ax.legend()
    fig.tight_layout()
    png = os.path.join(args.output, "loss_curves.png")
    fig.savefig(png, dpi=120)
    print(f"wrote {csv_path} and {png}")
print(f"{time.perf_counter() - start:.1f} s")
assert rows[-1][1] < rows[0][1], "training did not lower the training loss"
