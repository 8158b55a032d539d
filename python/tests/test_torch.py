"""stillpoint.torch: autograd through the converged SCF by one adjoint solve.

References: torch.autograd.gradcheck (central differences of the whole forward pass, a
general-purpose library check); the Hellmann–Feynman theorem dE/dv_ext(r) = n(r) (textbook);
recovery of a known potential parameter from its own density (our own scenario).
"""
import numpy as np
import pytest

torch = pytest.importorskip("torch")  # python3-torch is installed by tools/dev; see README

import stillpoint as sp  # noqa: E402
import stillpoint.torch as spt  # noqa: E402

LINE = {
    "name": "well",
    "kind": "line",
    "charge": -1.0,  # three electrons on a nucleus of charge 2 in a Gaussian dip (our own scenario)
    "spin": "polarized",
    "xc": ["lda_x_1d_soft", "lda_c_1d_csc"],
    "nucleus": [{"charge": 2.0, "position": 0.0, "softening": 1.0}],
    "potential": [{"kind": "gaussian", "depth": 0.3, "center": 0.7, "width": 1.1}],
    "grid": {"preset": "coarse", "half_width": 12.0},
}
PARAMS = [
    {"kind": "nucleus", "index": 0, "fields": ["charge"]},
    {"kind": "gaussian", "index": 0, "fields": ["depth", "width"]},
    {"kind": "xc_weight", "term": 1},
]


def test_gradcheck_energy_density_and_levels():
    ks = spt.KohnSham(LINE, PARAMS)
    theta = ks.initial().requires_grad_()
    assert ks.parameter_names == ["nucleus0.charge", "gaussian0.depth", "gaussian0.width", "w_lda_c_1d_csc"]
    # Every output at once: gradcheck differentiates each of them (3 + N + levels outputs).
    assert torch.autograd.gradcheck(lambda t: ks(t), (theta,), eps=1e-5, atol=1e-6, rtol=1e-5)


def test_energy_gradient_on_the_grid_is_the_density():
    # Hellmann–Feynman: at self-consistency dE/dv(x_k) = W_k n_k for a potential at node k.
    atom = {"name": "Ne", "kind": "atom", "element": "Ne", "xc": ["lda_x", "lda_c_pw"]}
    ks = spt.KohnSham(atom, [{"kind": "grid_potential"}])
    theta = ks.initial().requires_grad_()
    energy, density, _ = ks(theta)
    energy.backward()
    n_full = ks.state.total_density
    w_full = ks.state.weights
    expected = torch.from_numpy(np.asarray(w_full * n_full))
    interior = theta.grad.shape[0] == len(w_full) - 2
    ref = expected[1:-1] if interior else expected
    torch.testing.assert_close(theta.grad, ref, rtol=1e-10, atol=1e-14)
    assert ks.last_statistics["linear_solves"] == 0  # energy only: stationarity, no solve
    # Density and levels need one adjoint solve, however many grid parameters there are.
    theta.grad = None
    energy, density, levels = ks(theta)
    ((ks.weights * density ** 2).sum() + levels[-1]).backward()
    assert ks.last_statistics["linear_solves"] == 1
    g = theta.grad.clone()
    # Central differences of the whole program at two nodes.
    for k in (40, 120):
        h = 1e-4

        def loss(t):
            _, n, eps = ks(t)
            return float((ks.weights * n ** 2).sum() + eps[-1])

        tp, tm = theta.detach().clone(), theta.detach().clone()
        tp[k] += h
        tm[k] -= h
        fd = (loss(tp) - loss(tm)) / (2 * h)
        assert float(g[k]) == pytest.approx(fd, rel=1e-5, abs=1e-9)


def test_optimizer_recovers_a_potential_parameter_from_its_density():
    ks = spt.KohnSham(LINE, [{"kind": "gaussian", "index": 0, "fields": ["depth"]}])
    _, target, _ = ks(torch.tensor([0.3], dtype=torch.float64))
    target = target.detach()
    theta = torch.tensor([0.1], dtype=torch.float64, requires_grad=True)
    opt = torch.optim.LBFGS([theta], lr=1.0, max_iter=40, tolerance_grad=1e-14, tolerance_change=1e-16,
                            line_search_fn="strong_wolfe")

    def closure():
        opt.zero_grad()
        _, n, _ = ks(theta)
        loss = (ks.weights * (n - target) ** 2).sum() * 1e4
        loss.backward()
        return loss

    opt.step(closure)
    assert float(theta) == pytest.approx(0.3, abs=1e-6)


def test_bad_shapes_and_types_are_refused():
    ks = spt.KohnSham(LINE, [{"kind": "gaussian", "index": 0, "fields": ["depth"]}])
    with pytest.raises(TypeError, match="float64"):
        ks(torch.tensor([0.3], dtype=torch.float32))
    with pytest.raises(ValueError, match="expected 1 parameters"):
        ks(torch.tensor([0.3, 0.1], dtype=torch.float64))
    with pytest.raises(sp.InputError):
        spt.KohnSham(LINE, [{"kind": "gaussian", "index": 5, "fields": ["depth"]}])
    # A non-finite parameter is an input error naming it, before any SCF.
    for bad in (float("nan"), float("inf")):
        with pytest.raises(sp.InputError, match="gaussian0.depth' is not a finite number"):
            ks(torch.tensor([bad], dtype=torch.float64))
