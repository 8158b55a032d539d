"""Exchange-correlation terms defined in Python.

A term is registered under a name and then used like any other in xc lists, as
``"callback:<name>"``; its parameters are ``xc_parameter``\\ s of :func:`stillpoint.grad`,
:func:`stillpoint.fit` and :class:`stillpoint.torch.KohnSham`. The library hands the callable
every point of the mesh at once and checks what comes back. Hartree atomic units: energies per
volume in hartree/bohr (line) or hartree/bohr³ (atoms), densities in bohr⁻¹ or bohr⁻³.

For example::

    import torch, stillpoint as sp
    class Corr(torch.nn.Module):              # eps_c(r_s) per particle, hartree
        def __init__(self):
            super().__init__()
            self.net = torch.nn.Sequential(torch.nn.Linear(1, 8), torch.nn.Tanh(),
                                           torch.nn.Linear(8, 1)).double()
        def forward(self, rs):
            return -0.1 * torch.nn.functional.softplus(self.net(rs[:, None]))[:, 0]
    term = sp.xc.torch_term("nn_c", Corr(), variables=("rs",))
    he = sp.solve(system={..., "xc": ["lda_x_1d_soft", term.label]})

Two kinds:

- :func:`torch_term`: a ``torch.nn.Module`` of local variables (``VARIABLES``); every
  derivative the library needs comes from autograd: first derivatives for the potential,
  double backward for the kernel of the response, and the Jacobians in the module's
  parameters for gradients and fits.
- :func:`numpy_term`: a plain function supplying its own derivatives in the libxc layout.

A callable that raises has its exception raised again from the library call that used it;
a result of the wrong shape is a ValueError naming the term; a non-finite value is a
:class:`stillpoint.NumericalError` naming the term and the grid point. Nothing is replaced.
"""
import math
import threading

import numpy as np

from . import _core

__all__ = ["VARIABLES", "PythonTerm", "torch_term", "numpy_term", "registered"]

#: The local variables a torch term may take, in Hartree atomic units (d = 1 on the line, 3 for atoms).
VARIABLES = {
    "n": "total density (bohr^-d)",
    "n_up": "spin-up density",
    "n_down": "spin-down density",
    "zeta": "spin polarization (n_up - n_down) / n",
    "rs": "Wigner-Seitz radius: 1/(2n) on the line, (3/(4 pi n))^(1/3) for atoms (bohr)",
    "sigma": "|grad n|^2",
    "s2": "squared reduced gradient: sigma/(pi^2 n^4) on the line, sigma/(4 (3 pi^2)^(2/3) n^(8/3)) for atoms",
}
_GRADIENT_VARIABLES = {"sigma", "s2"}
_GEOMETRIES = {"any": (True, True), "line": (True, False), "atom": (False, True)}


def registered():
    """Names of the registered callback terms."""
    return list(_core.xc_callback_names())


class PythonTerm:
    """A registered callback term: ``label`` goes into xc lists, ``parameter_names`` and
    :meth:`initial` describe its parameter vector (the order of ``xc_parameter`` fields)."""

    def __init__(self, name, evaluate, gradient, geometry, parameter_names, values):
        if geometry not in _GEOMETRIES:
            raise _core.InputError(f"xc term '{name}': geometry must be 'any', 'line' or 'atom', not {geometry!r}")
        self.name = name
        self.label = "callback:" + name
        self.gradient = bool(gradient)
        self.geometry = geometry
        self.parameter_names = list(parameter_names)
        self._evaluate = evaluate
        self._values = np.asarray(values, dtype=np.float64).copy()
        self._register()

    def _register(self):
        line, atom = _GEOMETRIES[self.geometry]
        _core.register_xc_callback(self.name, self._evaluate, self.gradient, line, atom, self.parameter_names,
                                   self._values.tolist())

    def initial(self):
        """The current parameter values (a copy), the default of every system using the term."""
        return self._values.copy()

    def assign(self, theta):
        """Sets the parameter values (e.g. trained ones); later inputs that do not give
        ``xc_parameters`` for the term use them."""
        theta = np.asarray(theta, dtype=np.float64).reshape(-1)
        if theta.shape != self._values.shape:
            raise ValueError(f"xc term '{self.label}': expected {self._values.size} parameter values, got {theta.size}")
        if not np.all(np.isfinite(theta)):
            raise _core.InputError(f"xc term '{self.label}': parameter values must be finite")
        self._values = theta.copy()
        self._register()

    def parameter(self, **keys):
        """A [[parameter]] table for all of the term's parameters (``kind = "xc_parameter"``)."""
        return dict({"kind": "xc_parameter", "term": self.label}, **keys)

    def remove(self):
        """Unregisters the term (solved States keep it; later solves naming it fail)."""
        return _core.remove_xc_callback(self.name)

    def __repr__(self):
        return f"<stillpoint.xc.PythonTerm '{self.label}' with {len(self.parameter_names)} parameters>"


# ---- NumPy terms -------------------------------------------------------------------------------

class Points:
    """What a NumPy term is given: ``rho`` (points x spins: n, or n_up and n_down), ``sigma``
    (points x 1, or x 3: uu, ud, dd; None for a term without gradients), ``theta``, ``order``
    (1 or 2), ``parameter_derivatives`` (bool) and ``one_dimensional``."""

    __slots__ = ("rho", "sigma", "theta", "order", "parameter_derivatives", "one_dimensional")

    def __init__(self, rho, sigma, theta, order, parameter_derivatives, one_dimensional):
        self.rho, self.sigma, self.theta = rho, sigma, theta
        self.order, self.parameter_derivatives, self.one_dimensional = order, parameter_derivatives, one_dimensional


def numpy_term(name, function, *, parameters=None, gradient=False, geometry="any"):
    """Registers ``function(points) -> dict`` (a :class:`Points` in, arrays out, libxc layout).

    Keys: ``e`` (points,), ``vrho`` (points, spins); with ``gradient=True`` ``vsigma`` (points,
    1 or 3); for ``points.order == 2`` also ``v2rho2`` (points, 1 or 3: uu, ud, dd) and with
    gradients ``v2rhosigma`` and ``v2sigma2`` (points, 1 or 6); for
    ``points.parameter_derivatives`` ``de`` (parameters, points), ``dvrho`` (parameters, points,
    spins) and ``dvsigma``. ``parameters`` is a dict of name -> initial value.
    """
    parameters = dict(parameters or {})

    def evaluate(rho, sigma, theta, order, want, one_d):
        return function(Points(rho, sigma, theta, order, want, one_d))

    return PythonTerm(name, evaluate, gradient, geometry, list(parameters), list(parameters.values()))


# ---- torch terms -------------------------------------------------------------------------------

def _functional_call():
    import torch

    func = getattr(torch, "func", None)
    if func is not None and hasattr(func, "functional_call"):
        return func.functional_call
    from torch.nn.utils import stateless

    return stateless.functional_call


class _TorchEvaluator:
    """Energy per volume from the module, and the derivatives the library asks for by autograd."""

    def __init__(self, label, module, variables, per_volume):
        import torch

        self.torch = torch
        self.label = label
        self.module = module
        self.variables = tuple(variables)
        self.per_volume = per_volume
        self.call = _functional_call()
        self.shapes = [(k, tuple(p.shape)) for k, p in module.named_parameters()]
        # functional_call swaps the module's parameters in and out for the duration of a call,
        # and torch releases the GIL inside its operations: two library threads (grad with
        # threads > 1) would see each other's swaps and get wrong Jacobians. One call at a time.
        self._lock = threading.Lock()

    def names(self):
        out = []
        for k, shape in self.shapes:
            size = int(np.prod(shape)) if shape else 1
            out.extend([k] if size == 1 else [f"{k}[{i}]" for i in range(size)])
        return out

    def values(self):
        return np.concatenate([p.detach().cpu().double().reshape(-1).numpy() for _, p in self.module.named_parameters()]
                              or [np.zeros(0)])

    def unflatten(self, theta):
        out, at = {}, 0
        for k, shape in self.shapes:
            size = int(np.prod(shape)) if shape else 1
            out[k] = theta[at:at + size].reshape(shape)
            at += size
        return out

    def local(self, rho, sigma, one_d):
        torch = self.torch
        if rho.shape[1] == 1:
            n = rho[:, 0]
            up = down = 0.5 * n
            zeta = torch.zeros_like(n)
        else:
            up, down = rho[:, 0], rho[:, 1]
            n = up + down
            zeta = (up - down) / n
        v = {"n": n, "n_up": up, "n_down": down, "zeta": zeta}
        v["rs"] = 0.5 / n if one_d else (3.0 / (4.0 * math.pi * n)) ** (1.0 / 3.0)
        if sigma is not None:
            sig = sigma[:, 0] if sigma.shape[1] == 1 else sigma[:, 0] + 2.0 * sigma[:, 1] + sigma[:, 2]
            v["sigma"] = sig
            v["s2"] = sig / (math.pi ** 2 * n ** 4) if one_d else sig / (4.0 * (3.0 * math.pi ** 2) ** (2.0 / 3.0) * n ** (8.0 / 3.0))
        return n, v

    def energy(self, rho, sigma, theta, one_d):
        n, v = self.local(rho, sigma, one_d)
        out = self.call(self.module, self.unflatten(theta), tuple(v[k] for k in self.variables))
        if not isinstance(out, self.torch.Tensor):
            raise TypeError(f"xc term '{self.label}': the module returned a {type(out).__name__}, not a tensor")
        if out.dim() == 2 and out.shape[1] == 1:
            out = out[:, 0]
        if tuple(out.shape) != (rho.shape[0],):
            raise ValueError(f"xc term '{self.label}': the module returned shape {tuple(out.shape)} for "
                             f"{rho.shape[0]} points; return one value per point, shape ({rho.shape[0]},)")
        if out.dtype != self.torch.float64:
            raise TypeError(f"xc term '{self.label}': the module returned {out.dtype}; compute in float64 "
                            "(module.double()), derivatives through the SCF need double precision")
        return out if self.per_volume else n * out

    def jacobians(self, outputs, theta):
        """d y_i / d theta_p of every output y (shape (points,)) as (parameters, points) arrays."""
        torch = self.torch
        m, P = outputs[0].shape[0], theta.shape[0]
        Y = torch.stack(outputs, 1)
        J = torch.zeros((P, m, len(outputs)), dtype=torch.float64)
        if P == 0 or not Y.requires_grad:
            return [J[:, :, k] for k in range(len(outputs))]
        if P <= m:
            # Fewer parameters than points: g(u) = u . dY/dtheta is linear in u, and its
            # gradient in u is one row of the Jacobian per parameter (P + 1 backward passes).
            u = torch.zeros_like(Y, requires_grad=True)
            (g,) = torch.autograd.grad(Y, theta, grad_outputs=u, create_graph=True, allow_unused=True)
            if g is not None:
                for p in range(P):
                    if g[p].requires_grad:
                        (row,) = torch.autograd.grad(g[p], u, retain_graph=True, allow_unused=True)
                        if row is not None:
                            J[p] = row
        else:
            # More parameters than points: one vector-Jacobian product per point and output.
            eye = torch.eye(m, dtype=torch.float64)
            for k in range(len(outputs)):
                if not outputs[k].requires_grad:
                    continue
                for a in range(0, m, 256):
                    rows = eye[a:a + 256]
                    (g,) = torch.autograd.grad(outputs[k], theta, grad_outputs=rows, retain_graph=True,
                                               is_grads_batched=True, allow_unused=True)
                    if g is not None:
                        J[:, a:a + rows.shape[0], k] = g.T
        return [J[:, :, k] for k in range(len(outputs))]

    def __call__(self, rho_np, sigma_np, theta_np, order, want, one_d):
        torch = self.torch
        with self._lock, torch.enable_grad():
            rho = torch.from_numpy(rho_np).requires_grad_(True)
            sigma = None if sigma_np is None else torch.from_numpy(sigma_np).requires_grad_(True)
            theta = torch.from_numpy(theta_np).requires_grad_(want)
            e = self.energy(rho, sigma, theta, one_d)
            inputs = [rho] + ([sigma] if sigma is not None else [])
            graph = order >= 2 or want
            first = torch.autograd.grad(e.sum(), inputs, create_graph=graph, allow_unused=True) if e.requires_grad \
                else [None] * len(inputs)
            first = [torch.zeros_like(x) if g is None else g for x, g in zip(inputs, first)]
            out = {"e": e.detach().numpy(), "vrho": first[0].detach().numpy()}
            if sigma is not None:
                out["vsigma"] = first[1].detach().numpy()
            # Points are independent, so the gradient of a summed first derivative is the
            # per-point row of the Hessian: one double backward per variable.
            cols = [first[0][:, s] for s in range(rho.shape[1])]
            if sigma is not None:
                cols += [first[1][:, a] for a in range(sigma.shape[1])]
            if order >= 2:
                rows = []
                for c in cols:
                    g = torch.autograd.grad(c.sum(), inputs, retain_graph=True, allow_unused=True) if c.requires_grad \
                        else [None] * len(inputs)
                    rows.append([torch.zeros_like(x) if gi is None else gi.detach() for x, gi in zip(inputs, g)])
                ns = rho.shape[1]
                if ns == 1:
                    out["v2rho2"] = rows[0][0].numpy()
                    if sigma is not None:
                        out["v2rhosigma"] = rows[0][1].numpy()
                        out["v2sigma2"] = rows[1][1].numpy()
                else:
                    out["v2rho2"] = torch.stack([rows[0][0][:, 0], rows[0][0][:, 1], rows[1][0][:, 1]], 1).numpy()
                    if sigma is not None:
                        out["v2rhosigma"] = torch.stack([rows[s][1][:, a] for s in range(2) for a in range(3)], 1).numpy()
                        out["v2sigma2"] = torch.stack([rows[2 + a][1][:, b] for a in range(3) for b in range(a, 3)],
                                                      1).numpy()
            if want:
                J = self.jacobians([e] + cols, theta)
                ns = rho.shape[1]
                out["de"] = J[0].numpy()
                out["dvrho"] = torch.stack(J[1:1 + ns], 2).numpy()
                if sigma is not None:
                    out["dvsigma"] = torch.stack(J[1 + ns:], 2).numpy()
            return out


class TorchTerm(PythonTerm):
    """A registered torch term; :meth:`assign` also writes the values into the module."""

    def __init__(self, name, module, variables, per_volume, geometry):
        unknown = [v for v in variables if v not in VARIABLES]
        if unknown or not variables:
            raise _core.InputError(f"xc term '{name}': unknown variables {unknown or '(none given)'}; "
                                   f"choose from {', '.join(VARIABLES)}")
        self.module = module
        self.variables = tuple(variables)
        self._evaluator = _TorchEvaluator("callback:" + name, module, variables, per_volume)
        super().__init__(name, self._evaluator, bool(_GRADIENT_VARIABLES & set(variables)), geometry,
                         self._evaluator.names(), self._evaluator.values())

    def assign(self, theta):
        super().assign(theta)
        import torch

        with torch.no_grad():
            for (k, shape), value in zip(self._evaluator.shapes, self._evaluator.unflatten(torch.from_numpy(self._values))
                                         .values()):
                dict(self.module.named_parameters())[k].copy_(value.reshape(shape))


def torch_term(name, module, *, variables=("n",), per_volume=False, geometry="any"):
    """Registers a ``torch.nn.Module`` as an xc term.

    The module is called with one float64 tensor per entry of ``variables`` (names of
    :data:`VARIABLES`, each of shape (points,)) and returns one value per point: the energy per
    particle ε (hartree), or with ``per_volume=True`` the energy per volume e = n ε. Its
    parameters (``named_parameters()`` order, flattened) become the term's parameters.
    ``geometry`` is ``"any"``, ``"line"`` or ``"atom"``.
    """
    return TorchTerm(name, module, variables, per_volume, geometry)
