"""Exchange-correlation terms defined in Python (stillpoint.xc).

References: the built-in model families xalpha, pbe_x and rational_c_1d (themselves checked
against libxc in tests/model_functional_test.cpp) written again as torch modules or NumPy code:
the same total energies and parameter gradients to 1e-10; torch.autograd.gradcheck (central
differences of the whole forward pass, a general-purpose library check); the library's
central finite differences of the whole SCF (grad(verify=True)).
"""
import math
import traceback

import numpy as np
import pytest

torch = pytest.importorskip("torch")

import stillpoint as sp  # noqa: E402
import stillpoint.torch as spt  # noqa: E402

TIGHT = {"potential_tolerance": 1e-12, "energy_tolerance": 1e-13, "eigenvalue_tolerance": 1e-12, "max_iterations": 400}
DIRAC = -0.75 * (3.0 / math.pi) ** (1.0 / 3.0)  # Dirac exchange: e = DIRAC n^(4/3), hartree/bohr^3
BE = {"name": "Be", "kind": "atom", "element": "Be", "grid": {"preset": "coarse"}}
LI = {"name": "Li", "kind": "atom", "element": "Li", "spin": "polarized", "grid": {"preset": "coarse"}}
HE_LINE = {"name": "He", "kind": "line", "nucleus": [{"charge": 2.0, "position": 0.0, "softening": 1.0}],
           "grid": {"preset": "coarse", "half_width": 12.0}}


class XAlpha(torch.nn.Module):
    """X-alpha in the spin densities, per volume: (3 alpha / 2) sum_s DIRAC (2 n_s)^(4/3) / 2."""

    def __init__(self, alpha=2.0 / 3.0):
        super().__init__()
        self.alpha = torch.nn.Parameter(torch.tensor(alpha, dtype=torch.float64))

    def forward(self, up, down):
        return 0.75 * self.alpha * DIRAC * ((2 * up) ** (4 / 3) + (2 * down) ** (4 / 3))


class PbeX(torch.nn.Module):
    """PBE-form exchange of an unpolarized density, per volume: DIRAC n^(4/3) F(s^2)."""

    def __init__(self, kappa=0.804, mu=0.2195149727645171):
        super().__init__()
        self.kappa = torch.nn.Parameter(torch.tensor(kappa, dtype=torch.float64))
        self.mu = torch.nn.Parameter(torch.tensor(mu, dtype=torch.float64))

    def forward(self, n, s2):
        return DIRAC * n ** (4 / 3) * (1 + self.kappa - self.kappa / (1 + self.mu * s2 / self.kappa))


RATIONAL = [0.03, 0.01, 0.2, 0.05, 0.01]  # a1 a2 b1 b2 b3 of rational_c_1d, away from its zero defaults


class RationalC(torch.nn.Module):
    """rational_c_1d per particle: -(a1 rs + a2 rs^2) / (1 + b1 rs + b2 rs^2 + b3 rs^3)."""

    def __init__(self):
        super().__init__()
        for k, v in zip(("a1", "a2", "b1", "b2", "b3"), RATIONAL):
            setattr(self, k, torch.nn.Parameter(torch.tensor(v, dtype=torch.float64)))

    def forward(self, rs):
        return -(self.a1 * rs + self.a2 * rs ** 2) / (1 + self.b1 * rs + self.b2 * rs ** 2 + self.b3 * rs ** 3)


class SmallNet(torch.nn.Module):
    """A small correlation network eps_c(rs) < 0 (hartree per particle)."""

    def __init__(self, hidden=3, seed=0):
        super().__init__()
        g = torch.Generator().manual_seed(seed)
        self.net = torch.nn.Sequential(torch.nn.Linear(1, hidden), torch.nn.Tanh(), torch.nn.Linear(hidden, 1)).double()
        with torch.no_grad():
            for p in self.net.parameters():
                p.copy_(0.5 * torch.randn(p.shape, generator=g, dtype=torch.float64))

    def forward(self, rs):
        x = rs / (1 + rs)  # bounded input: rs runs from ~0.2 to 1e29 bohr over the grid
        return -0.05 * torch.nn.functional.softplus(self.net(x[:, None]))[:, 0]


def ks_pair(builtin, term, system, params, parameters):
    """Energy, density and level gradients through the torch Function for both forms."""
    out = []
    for xc, table in ((builtin, {"xc_parameters": {builtin[0]: params}}), (term, {})):
        ks = spt.KohnSham(dict(system, xc=xc, **table), parameters, scf=TIGHT)
        theta = ks.initial().requires_grad_()
        e, n, eps = ks(theta)
        loss = e + (ks.weights * n ** 2).sum() + eps[0]
        loss.backward()
        out.append((float(e), theta.grad.numpy().copy(), ks.parameter_names))
    return out


@pytest.mark.parametrize("system", [BE, LI], ids=["Be", "Li polarized"])
def test_torch_xalpha_reproduces_the_builtin_family(system):
    term = sp.xc.torch_term("xa_torch", XAlpha(0.7), variables=("n_up", "n_down"), per_volume=True)
    (ea, ga, na), (eb, gb, nb) = ks_pair(["model:xalpha", "lda_c_pw"], [term.label, "lda_c_pw"], system, [0.7],
                                         [{"kind": "xc_parameter", "term": 0}])
    assert nb == ["callback:xa_torch.alpha"]
    assert eb == pytest.approx(ea, abs=1e-10)
    np.testing.assert_allclose(gb, ga, rtol=1e-10, atol=1e-12)


def test_torch_gga_reproduces_the_builtin_pbe_exchange():
    # A gradient term: the kernel of the response carries v2rhosigma and v2sigma2.
    term = sp.xc.torch_term("pbe_torch", PbeX(0.9, 0.25), variables=("n", "s2"), per_volume=True, geometry="atom")
    assert term.gradient and term.parameter_names == ["kappa", "mu"]
    (ea, ga, _), (eb, gb, _) = ks_pair(["model:pbe_x", "lda_c_pw"], [term.label, "lda_c_pw"], BE, [0.9, 0.25],
                                       [{"kind": "xc_parameter", "term": 0}])
    assert eb == pytest.approx(ea, abs=1e-10)
    np.testing.assert_allclose(gb, ga, rtol=1e-10, atol=1e-12)


def test_torch_1d_correlation_reproduces_rational_c_1d_in_grad():
    term = sp.xc.torch_term("rational_torch", RationalC(), variables=("rs",), geometry="line")
    results = []
    for xc, extra in ((["lda_x_1d_soft", "model:rational_c_1d"], {"xc_parameters": {"model:rational_c_1d": RATIONAL}}),
                      (["lda_x_1d_soft", term.label], {})):
        r = sp.grad(system=[dict(HE_LINE, xc=xc, **extra)],
                    parameter=[{"kind": "xc_parameter", "term": 1}],
                    loss=[{"kind": "energy", "system": "He", "target": -2.3},
                          {"kind": "eigenvalue", "system": "He", "state": "homo", "target": -0.7}],
                    scf=TIGHT)
        results.append(r)
    a, b = results
    assert b["parameters"] == ["callback:rational_torch." + k for k in ("a1", "a2", "b1", "b2", "b3")]
    assert b["term_quantities"] == pytest.approx(a["term_quantities"], abs=1e-10)
    np.testing.assert_allclose(b["gradient"], a["gradient"], rtol=1e-10, atol=1e-12)


def numpy_xalpha(pts):
    """X-alpha with its own derivatives (libxc layout), unpolarized or polarized."""
    alpha = pts.theta[0]
    rho = pts.rho
    if rho.shape[1] == 1:
        n = rho[:, 0]
        f, df, d2f = 1.5 * DIRAC * n ** (4 / 3), 2 * DIRAC * np.cbrt(n), (2 / 3) * DIRAC * n ** (-2 / 3)
        out = {"e": alpha * f, "vrho": alpha * df[:, None], "v2rho2": alpha * d2f[:, None]}
        if pts.parameter_derivatives:
            out.update(de=f[None, :], dvrho=df[None, :, None])
        return out
    t = 2 * rho
    f, df = 0.75 * DIRAC * t ** (4 / 3), 2 * DIRAC * np.cbrt(t)
    # A spin the library passes as absent (exactly 0) has an infinite second derivative, which
    # it ignores; 0 keeps NumPy quiet.
    d2 = (4 / 3) * DIRAC * np.where(t > 0, t, 1.0) ** (-2 / 3) * (t > 0)
    out = {"e": alpha * f.sum(1), "vrho": alpha * df,
           "v2rho2": alpha * np.stack([d2[:, 0], np.zeros(len(t)), d2[:, 1]], 1)}
    if pts.parameter_derivatives:
        out.update(de=f.sum(1)[None, :], dvrho=df[None, :, :])
    return out


def test_numpy_term_with_its_own_derivatives_reproduces_xalpha():
    term = sp.xc.numpy_term("xa_numpy", numpy_xalpha, parameters={"alpha": 0.7})
    for system in (BE, LI):
        (ea, ga, _), (eb, gb, _) = ks_pair(["model:xalpha", "lda_c_pw"], [term.label, "lda_c_pw"], system, [0.7],
                                           [{"kind": "xc_parameter", "term": 0}])
        assert eb == pytest.approx(ea, abs=1e-10)
        np.testing.assert_allclose(gb, ga, rtol=1e-10, atol=1e-12)


def test_gradcheck_of_the_torch_function_in_network_parameters():
    net = SmallNet()
    term = sp.xc.torch_term("net_gc", net, variables=("rs",), geometry="line")
    assert len(term.parameter_names) == 10 and term.parameter_names[0] == "net.0.weight[0]"
    ks = spt.KohnSham(dict(HE_LINE, xc=["lda_x_1d_soft", term.label]), [term.parameter()])
    theta = ks.initial().requires_grad_()
    assert torch.autograd.gradcheck(lambda t: ks(t), (theta,), eps=1e-5, atol=1e-6, rtol=1e-5)


def test_adjoint_gradient_matches_central_differences_of_the_scf():
    # Three electrons, spin-polarized: the zeta derivatives enter the kernel.
    class Net2(SmallNet):
        def forward(self, rs, zeta):
            return super().forward(rs) * (1 + 0.1 * zeta ** 2)

    term = sp.xc.torch_term("net_fd", Net2(seed=1), variables=("rs", "zeta"), geometry="line")
    r = sp.grad(system=[dict(HE_LINE, name="He3", charge=-1.0, spin="polarized", xc=["lda_x_1d_soft", term.label])],
                parameter=[term.parameter()],
                loss=[{"kind": "energy", "system": "He3", "target": -2.5},
                      {"kind": "eigenvalue", "system": "He3", "state": "homo", "spin": "up", "target": -0.3}],
                scf=TIGHT, verify=True)
    fd = np.asarray(r["finite_difference_gradient"])
    g = np.asarray(r["gradient"])
    np.testing.assert_allclose(g, fd, rtol=1e-6, atol=1e-9 * np.abs(fd).max())


def test_torch_optim_trains_a_term_parameter():
    # Recover alpha = 0.7 from the energy it gives (our own scenario).
    target = sp.solve(system=dict(BE, xc=["model:xalpha"], xc_parameters={"model:xalpha": [0.7]}), scf=TIGHT)
    term = sp.xc.torch_term("xa_train", XAlpha(0.6), variables=("n_up", "n_down"), per_volume=True)
    ks = spt.KohnSham(dict(BE, xc=[term.label]), [term.parameter()])
    theta = ks.initial().requires_grad_()
    opt = torch.optim.LBFGS([theta], max_iter=30, tolerance_grad=1e-14, tolerance_change=1e-16,
                            line_search_fn="strong_wolfe")

    def closure():
        opt.zero_grad()
        loss = (ks(theta)[0] - target.energy["total"]) ** 2
        loss.backward()
        return loss

    opt.step(closure)
    assert float(theta) == pytest.approx(0.7, abs=1e-6)
    term.assign(theta.detach().numpy())
    assert float(term.module.alpha) == pytest.approx(float(theta), abs=0)
    assert term.initial()[0] == pytest.approx(float(theta), abs=0)


class Failing(torch.nn.Module):
    def __init__(self, mode):
        super().__init__()
        self.mode = mode
        self.scale = torch.nn.Parameter(torch.tensor(1.0, dtype=torch.float64))

    def forward(self, rs):
        eps = -0.03 * self.scale * rs / (1 + rs)
        if self.mode == "raise":
            raise KeyError("no such table in the user's network")
        if self.mode == "nan":
            return torch.where(rs > 3.0, torch.full_like(rs, float("nan")), eps)
        if self.mode == "shape":
            return eps[:-1]
        if self.mode == "float32":
            return eps.float()
        return eps


def test_a_raising_callable_is_raised_again_and_the_interpreter_lives(tmp_path):
    term = sp.xc.torch_term("bad_raise", Failing("raise"), variables=("rs",), geometry="line")
    system = dict(HE_LINE, xc=["lda_x_1d_soft", term.label])
    with pytest.raises(KeyError, match="no such table") as info:
        sp.solve(system=system)
    assert "forward" in "".join(traceback.format_tb(info.value.__traceback__))  # the user's frame is kept
    assert any("'callback:bad_raise'" in note for note in getattr(info.value, "__notes__", ["'callback:bad_raise'"]))
    # Through the adjoint with two systems on two threads, and through fit with a checkpoint.
    with pytest.raises(KeyError):
        sp.grad(system=[dict(system, name="a"), dict(system, name="b")], parameter=[term.parameter()],
                loss=[{"kind": "energy", "system": "a"}, {"kind": "energy", "system": "b"}], threads=2)
    with pytest.raises(KeyError):
        sp.fit(system=[system], parameter=[term.parameter()],
               loss=[{"kind": "energy", "system": "He", "target": -2.0}], checkpoint=tmp_path / "run.ckpt")
    assert list(tmp_path.iterdir()) == []  # nothing written
    # The interpreter and the library go on.
    ok = sp.solve(system=dict(HE_LINE, xc=["lda_x_1d_soft"]))
    assert ok.energy["total"] < 0


def test_nan_wrong_shape_and_dtype_are_clear_errors(tmp_path):
    nan = sp.xc.torch_term("bad_nan", Failing("nan"), variables=("rs",), geometry="line")
    with pytest.raises(sp.NumericalError, match=r"'callback:bad_nan' returned a non-finite energy density at x = "
                                                r"-?[0-9.]+ bohr, where n = [0-9.e+-]+ \(bohr\^-1\)"):
        sp.solve(system=dict(HE_LINE, xc=["lda_x_1d_soft", nan.label]))
    shape = sp.xc.torch_term("bad_shape", Failing("shape"), variables=("rs",), geometry="line")
    with pytest.raises(ValueError, match=r"'callback:bad_shape'.*shape \(\d+,\) for \d+ points"):
        sp.solve(system=dict(HE_LINE, xc=["lda_x_1d_soft", shape.label]))
    # Neither leaves a file behind, even from a fit with a checkpoint.
    for term, error in ((nan, sp.NumericalError), (shape, ValueError)):
        with pytest.raises(error):
            sp.fit(system=[dict(HE_LINE, xc=["lda_x_1d_soft", term.label])], parameter=[term.parameter()],
                   loss=[{"kind": "energy", "system": "He", "target": -2.0}], checkpoint=tmp_path / "run.ckpt")
    assert list(tmp_path.iterdir()) == []
    single = sp.xc.torch_term("bad_dtype", Failing("float32"), variables=("rs",), geometry="line")
    with pytest.raises(TypeError, match="float64"):
        sp.solve(system=dict(HE_LINE, xc=["lda_x_1d_soft", single.label]))

    def short(pts):
        return {"e": np.zeros(len(pts.rho)), "vrho": np.zeros(len(pts.rho) - 1)}

    bad = sp.xc.numpy_term("bad_numpy", short)
    with pytest.raises(ValueError, match=r"'callback:bad_numpy': 'vrho' has shape \(\d+,\), expected \(\d+, 1\)"):
        sp.solve(system=dict(HE_LINE, xc=["lda_x_1d_soft", bad.label]))
    none = sp.xc.numpy_term("bad_none", lambda pts: None)
    with pytest.raises(TypeError, match="returned a NoneType; return a dict"):
        sp.solve(system=dict(HE_LINE, xc=[none.label]))


def test_names_geometry_and_variables_are_checked():
    with pytest.raises(sp.InputError, match=r"no xc callback named 'nosuch'"):
        sp.solve(system=dict(HE_LINE, xc=["callback:nosuch"]))
    term = sp.xc.torch_term("line_only", RationalC(), variables=("rs",), geometry="line")
    with pytest.raises(sp.InputError, match="written for line systems"):
        sp.solve(system=dict(BE, xc=[term.label]))
    with pytest.raises(sp.InputError, match="unknown variables"):
        sp.xc.torch_term("bad_vars", RationalC(), variables=("r_s",))
    with pytest.raises(sp.InputError, match="letters, digits"):
        sp.xc.numpy_term("bad name", numpy_xalpha)
    assert "line_only" in sp.xc.registered()
    assert term.remove() and "line_only" not in sp.xc.registered()


class Polarized(torch.nn.Module):
    """A GGA-type energy per particle of (n, zeta, s2) with every second derivative nonzero."""

    def __init__(self, width):
        super().__init__()
        g = torch.Generator().manual_seed(3)
        self.w = torch.nn.Parameter(0.3 * torch.randn(width, 3, generator=g, dtype=torch.float64))
        self.v = torch.nn.Parameter(0.3 * torch.randn(width, generator=g, dtype=torch.float64))

    def forward(self, n, zeta, s2):
        x = torch.stack([n.log(), zeta, s2 / (1 + s2)], 1)
        return -0.1 * (torch.tanh(x @ self.w.T) @ self.v) * (1 + zeta ** 2)


@pytest.mark.parametrize("width", [2, 40], ids=["fewer parameters than points", "more parameters than points"])
def test_evaluator_layout_matches_torch_functional_derivatives(width):
    # torch.autograd.functional (a general-purpose library routine) on one point at a time
    # against the vectorized evaluator in the libxc layout of include/stillpoint/xc/functional.hpp.
    term = sp.xc.torch_term(f"layout_{width}", Polarized(width), variables=("n", "zeta", "s2"), geometry="atom")
    rng = np.random.default_rng(4)
    m = 7
    rho = rng.uniform(0.05, 2.0, (m, 2))
    sigma = rng.uniform(0.01, 1.0, (m, 3))
    theta = term.initial()
    out = term._evaluate(rho, sigma, theta, 2, True, False)
    ev = term._evaluator

    def e_point(x, th):
        return ev.energy(x[None, :2], x[None, 2:], th, False)[0]

    th = torch.from_numpy(theta)
    for i in range(m):
        x = torch.from_numpy(np.concatenate([rho[i], sigma[i]]))
        H = torch.autograd.functional.hessian(lambda y: e_point(y, th), x).numpy()
        g = torch.autograd.functional.jacobian(lambda y: e_point(y, th), x).numpy()
        np.testing.assert_allclose(out["vrho"][i], g[:2], rtol=1e-12, atol=1e-14)
        np.testing.assert_allclose(out["vsigma"][i], g[2:], rtol=1e-12, atol=1e-14)
        np.testing.assert_allclose(out["v2rho2"][i], [H[0, 0], H[0, 1], H[1, 1]], rtol=1e-12, atol=1e-14)
        np.testing.assert_allclose(out["v2rhosigma"][i], H[:2, 2:].reshape(-1), rtol=1e-12, atol=1e-14)
        np.testing.assert_allclose(out["v2sigma2"][i], H[2:, 2:][np.triu_indices(3)], rtol=1e-12, atol=1e-14)
        # Parameters: d e / d theta and d (de/dx) / d theta.
        de = torch.autograd.functional.jacobian(lambda t: e_point(x, t), th).numpy()
        mixed = torch.autograd.functional.jacobian(
            lambda t: torch.autograd.functional.jacobian(lambda y: e_point(y, t), x, create_graph=True), th).numpy()
        np.testing.assert_allclose(out["de"][:, i], de, rtol=1e-12, atol=1e-14)
        np.testing.assert_allclose(out["dvrho"][:, i, :], mixed[:2].T, rtol=1e-12, atol=1e-14)
        np.testing.assert_allclose(out["dvsigma"][:, i, :], mixed[2:].T, rtol=1e-12, atol=1e-14)


def test_fit_trains_a_torch_term_parameter_with_both_optimizers():
    # The built-in family at alpha = 0.7 makes the target energy (our own scenario).
    target = sp.solve(system=dict(BE, xc=["model:xalpha"], xc_parameters={"model:xalpha": [0.7]}), scf=TIGHT)
    term = sp.xc.torch_term("xa_fit", XAlpha(0.6), variables=("n_up", "n_down"), per_volume=True)
    for optimizer in ("lbfgs", "levenberg_marquardt"):  # adjoint gradients, tangent Jacobians
        r = sp.fit(system=[dict(BE, xc=[term.label])], scf=TIGHT,
                   parameter=[term.parameter(lower=0.3, upper=1.2)],
                   loss=[{"kind": "energy", "system": "Be", "target": target.energy["total"]}],
                   fit={"optimizer": optimizer, "uncertainties": False})
        assert r["parameters"] == ["callback:xa_fit.alpha"]
        assert r["fitted"][0] == pytest.approx(0.7, abs=1e-6), optimizer


def test_worker_threads_give_the_same_gradient():
    # grad(threads=2) runs the callable from two library threads, one at a time under the GIL;
    # the library promises results independent of the thread count (docs/grad.md).
    term = sp.xc.torch_term("net_threads", SmallNet(seed=2), variables=("rs",), geometry="line")
    systems = [dict(HE_LINE, name=f"Z{k}", nucleus=[{"charge": z, "position": 0.0, "softening": 1.0}],
                    charge=z - 2.0, xc=["lda_x_1d_soft", term.label]) for k, z in enumerate((1.5, 2.5))]
    loss = [{"kind": "eigenvalue", "system": s["name"], "state": "homo", "target": -0.5} for s in systems]
    one = sp.grad(system=systems, parameter=[term.parameter()], loss=loss, threads=1)
    two = sp.grad(system=systems, parameter=[term.parameter()], loss=loss, threads=2)
    assert one["loss"] == two["loss"]
    np.testing.assert_array_equal(one["gradient"], two["gradient"])
