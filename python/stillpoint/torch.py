"""PyTorch bridge: the converged Kohn–Sham solution as a differentiable function.

The forward pass runs the SCF to convergence; the backward pass runs one adjoint linear solve
through the fixed point (never the unrolled iterations), so gradients are exact for the
discretization at about the cost of one SCF, whatever the number of parameters::

    import torch, stillpoint.torch as spt
    ks = spt.KohnSham(system={"name": "He", "kind": "line", "xc": ["lda_x_1d_soft", "lda_c_1d_csc"],
                              "nucleus": [{"charge": 2.0}]},
                      parameters=[{"kind": "grid_potential", "system": "He"}])
    theta = ks.initial().requires_grad_()
    energy, density, levels = ks(theta)       # hartree; electrons/bohr at ks.nodes; hartree
    (energy + (ks.weights * density**2).sum()).backward()   # theta.grad: d/d v_ext at every node

Parameters are [[parameter]] tables of docs/grad.md (``xc_weight``, ``xc_parameter``,
``gaussian``, ``harmonic``, ``nucleus``, ``grid_potential``), so an external potential on the
grid, xc model parameters and nuclear charges or positions are all inputs. Double precision
throughout; works with ``torch.optim`` and ``torch.autograd.gradcheck``.

The density output holds the nodes that are variables of the discrete problem (the interior
nodes: the box edges of a line system, where the density is zero, and r = 0 of an atom, which
has no quadrature weight, are left out); ``nodes`` and ``weights`` belong to it, so
``(weights * density).sum()`` is the electron count.
"""
import numpy as np
import torch

from . import _core, grad_input, response_options, scf_options, ScfOptions, ResponseOptions

__all__ = ["KohnSham", "KohnShamFunction"]


class KohnShamFunction(torch.autograd.Function):
    """forward(theta, problem) -> (energy, density, levels); backward: one adjoint solve."""

    @staticmethod
    def forward(ctx, theta, problem):
        state = problem._solve(theta.detach().cpu().numpy().astype(np.float64))
        ctx.problem = problem
        ctx.state = state
        energy = torch.tensor(state.energy["total"], dtype=torch.float64)
        n = np.asarray(state.total_density)[1:-1]
        levels = np.array([lv["energy"] for lv in state.levels], dtype=np.float64)
        return energy, torch.from_numpy(n.copy()), torch.from_numpy(levels)

    @staticmethod
    @torch.autograd.function.once_differentiable
    def backward(ctx, g_energy, g_density, g_levels):
        problem, state = ctx.problem, ctx.state
        n_nodes = len(state.nodes)
        w_density = np.zeros(n_nodes)
        if g_density is not None:
            w_density[1:-1] = g_density.detach().cpu().numpy()
        w_levels = [] if g_levels is None else g_levels.detach().cpu().numpy().tolist()
        w_energy = 0.0 if g_energy is None else float(g_energy)
        grad, stats = state.vector_jacobian(problem.parameters_, w_energy, w_density, w_levels)
        problem.last_statistics = stats
        return torch.from_numpy(np.asarray(grad, dtype=np.float64)), None


class KohnSham:
    """One system and a list of parameters; calling it with the parameter vector returns
    (total energy, density at ``nodes``, every level's energy), all differentiable.

    ``system`` is a [[system]] table (dict) or a path to a `solve`/`grad` input with one
    system; ``parameters`` a list of [[parameter]] tables (the ``system`` key may be omitted).
    ``scf`` and ``response`` are dicts of options (tight defaults here: derivatives are only as
    good as the converged solution). Successive calls start from the previous solution.
    """

    def __init__(self, system, parameters, scf=None, response=None):
        if isinstance(system, dict):
            name = system.get("name", "system")
            params = [dict(p, system=p.get("system", name)) if p.get("kind") == "grid_potential" else dict(p)
                      for p in parameters]
            self._input = grad_input(system=[system], parameter=params, loss=[{"kind": "energy", "system": name}])
        else:
            self._input = grad_input(system)
        if len(self._input.base.systems) != 1:
            raise _core.InputError("stillpoint.torch.KohnSham: give exactly one system")
        self.parameters_ = list(self._input.parameters)
        defaults = dict(potential_tolerance=1e-12, energy_tolerance=1e-13, eigenvalue_tolerance=1e-12,
                        max_iterations=400)
        self._scf = scf if isinstance(scf, ScfOptions) else scf_options(**{**defaults, **(scf or {})})
        self._response = response if isinstance(response, ResponseOptions) else response_options(**(response or {}))
        self._last = None
        self.last_statistics = None
        first = self._solve(np.asarray(self._input.initial_values, dtype=np.float64))
        self.nodes = torch.from_numpy(np.asarray(first.nodes)[1:-1].copy())
        self.weights = torch.from_numpy(np.asarray(first.weights)[1:-1].copy())
        self.level_labels = [(lv["label"], lv["spin"]) for lv in first.levels]

    @property
    def parameter_refs(self):
        """The :class:`stillpoint.Parameter` list, in the order of the parameter vector."""
        return self.parameters_

    @property
    def parameter_names(self):
        return [p.name for p in self.parameters_]

    def initial(self):
        """The parameter values of the input, as a float64 tensor (a copy)."""
        return torch.tensor(np.asarray(self._input.initial_values), dtype=torch.float64)

    @property
    def state(self):
        """The :class:`stillpoint.State` of the last forward pass."""
        return self._last

    def _solve(self, theta):
        spec = _core.apply_parameters(self._input.base.systems, self.parameters_, theta)[0]
        state = _core.solve_system(spec, self._scf, self._response, self._last)
        self._last = state
        return state

    def __call__(self, theta):
        if theta.dtype != torch.float64:
            raise TypeError("stillpoint.torch.KohnSham: the parameter vector must be float64")
        if theta.dim() != 1 or theta.numel() != len(self.parameters_):
            raise ValueError(f"stillpoint.torch.KohnSham: expected {len(self.parameters_)} parameters "
                             f"({', '.join(self.parameter_names[:4])}{', ...' if len(self.parameters_) > 4 else ''}), "
                             f"got shape {tuple(theta.shape)}")
        return KohnShamFunction.apply(theta, self)
