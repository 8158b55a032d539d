"""stillpoint: Kohn–Sham solutions of 1D model systems and spherical atoms, and their exact
derivatives through the SCF fixed point, from Python.

Hartree atomic units everywhere: energies in hartree, lengths in bohr, densities in electrons
per bohr (line systems) or per bohr^3 (atoms).

Every job of the command-line program is a function here, with the same inputs: a path to an
input file, or a dict with the keys of that file (docs/input.md, docs/grad.md, docs/fit.md,
docs/exact.md, docs/invert.md), which is validated by the same reader, so an error names the
same key path a file would::

    import stillpoint as sp
    ne = sp.solve(system={"name": "Ne", "kind": "atom", "element": "Ne",
                          "xc": ["lda_x", "lda_c_pw"]})
    ne.energy["total"], ne.levels[-1]["energy"]       # hartree
    ne.nodes, ne.weights, ne.total_density             # NumPy arrays

Errors raise :class:`InputError` (a ValueError: the input is wrong), :class:`NumericalError`
(a RuntimeError: valid input, failed computation, e.g. an SCF that did not converge; the
message carries the residual history) or :class:`OutputError` (an OSError). The GIL is
released while the library computes.

The PyTorch bridge is :mod:`stillpoint.torch`; exchange-correlation terms written in Python
(torch modules or NumPy functions) are :mod:`stillpoint.xc`.
"""
import os

import numpy as np

from . import _core
from ._core import (  # noqa: F401  (re-exported)
    ExactInput,
    FitWorkflow,
    GradInput,
    InputError,
    InvertInput,
    NumericalError,
    OutputError,
    Parameter,
    ResponseOptions,
    ScfOptions,
    SolveInput,
    State,
    System,
)
from ._toml import dumps as _dumps
from . import xc  # noqa: F401  (Python-defined xc terms: stillpoint.xc)

__all__ = [
    "load", "solve", "check", "grad", "fit", "exact", "invert", "grad_input", "scf_options",
    "response_options", "InputError", "NumericalError", "OutputError", "State", "System",
    "Parameter", "ScfOptions", "ResponseOptions",
]

_PYTHON_INPUT = "<python input>"


def _is_path(x):
    return isinstance(x, (str, bytes, os.PathLike))


def _document(source, kwargs, what):
    """The input as TOML text plus a name for messages, from a dict or keyword tables."""
    doc = dict(source) if isinstance(source, dict) else {}
    for k, v in kwargs.items():
        if v is not None:
            doc[k] = v
    if not doc:
        raise TypeError(f"{what}: give a path, a dict with the input file's keys, or keyword tables")
    return _dumps(doc)


def scf_options(**keys):
    """:class:`ScfOptions` with the given fields set (the [scf] keys of docs/input.md).

    Defaults: max_iterations 200, potential_tolerance 1e-9 Ha, energy_tolerance 1e-10 Ha,
    eigenvalue_tolerance 1e-9 Ha, mixing 0.5, history 8.
    """
    o = ScfOptions()
    for k, v in keys.items():
        if not hasattr(o, k):
            raise InputError(f"scf: unknown key '{k}'")
        setattr(o, k, v)
    return o


def response_options(**keys):
    """:class:`ResponseOptions` with the given fields set (krylov_tolerance 1e-12 by default)."""
    o = ResponseOptions()
    for k, v in keys.items():
        if not hasattr(o, k):
            raise InputError(f"response: unknown key '{k}'")
        setattr(o, k, v)
    return o


def load(path):
    """Reads a `solve` input file into a :class:`SolveInput` (its ``systems`` and ``scf``)."""
    return _core.read_solve(os.fspath(path))


def _solve_input(source, system, systems, scf_table):
    if isinstance(source, SolveInput):
        return source
    if _is_path(source):
        return _core.read_solve(os.fspath(source))
    if isinstance(source, System):
        return None
    sys_list = systems if systems is not None else ([system] if system is not None else None)
    text = _document(source, {"scf": scf_table, "system": sys_list}, "solve")
    return _core.parse_solve(text, _PYTHON_INPUT)


def solve(source=None, *, system=None, systems=None, scf=None, start=None, response=None):
    """Solves the Kohn–Sham equations self-consistently.

    ``source`` is a path to a `solve` input file, a dict with its keys (``{"scf": {...},
    "system": [{...}, ...]}``), a :class:`SolveInput` from :func:`load`, or a :class:`System`;
    or give ``system={...}`` (one [[system]] table) or ``systems=[...]``.
    ``scf`` is a dict of [scf] keys or an :class:`ScfOptions` (it overrides the file's).
    ``start`` is a previous :class:`State` of the same system (a warm start: the SCF begins
    from its potential; same grid required, else it is ignored).

    Returns a :class:`State` when the input holds one system, else a list of them. A
    calculation that does not converge raises :class:`NumericalError` with its history.
    """
    scf_obj = scf if isinstance(scf, ScfOptions) else None
    scf_table = scf if isinstance(scf, dict) else None
    resp = response if isinstance(response, ResponseOptions) else response_options(**(response or {}))
    if isinstance(source, System):
        return _core.solve_system(source, scf_obj or scf_options(**(scf_table or {})), resp, start)
    inp = _solve_input(source, system, systems, scf_table)
    opts = scf_obj or inp.scf
    if scf_table is not None and isinstance(source, (SolveInput, str, bytes, os.PathLike)):
        opts = scf_options(**scf_table)
    states = []
    for i, s in enumerate(inp.systems):
        warm = start[i] if isinstance(start, (list, tuple)) else start
        states.append(_core.solve_system(s, opts, resp, warm))
    return states[0] if len(states) == 1 else states


def check(*tables, tolerance=1e-6, grid="default", scf=None):
    """Compares computed atoms with reference tables (CSV files, docs/check.md).

    Returns a dict: ``rows`` (one dict per table row: reference, computed, deviation in hartree,
    passed), ``checked``, ``failed``, ``max_abs_deviation``.
    """
    if not tables:
        raise TypeError("check: give at least one reference table")
    opts = scf if isinstance(scf, ScfOptions) else scf_options(**(scf or {}))
    return _core.check([os.fspath(t) for t in tables], float(tolerance), grid, opts)


def grad_input(source=None, **tables):
    """Reads a `grad` input (path, dict, or keyword tables such as ``system=[...]``,
    ``parameter=[...]``, ``loss=[...]``, ``grad={...}``) into a :class:`GradInput`."""
    if isinstance(source, GradInput):
        return source
    if _is_path(source):
        return _core.read_grad(os.fspath(source))
    return _core.parse_grad(_document(source, tables, "grad"), _PYTHON_INPUT)


def grad(source=None, *, theta=None, threads=1, verify=False, **tables):
    """Loss and its exact gradient (adjoint through the SCF fixed point) for a `grad` input.

    ``theta`` sets the parameter values (default: the input's). With ``verify=True`` the
    central-difference gradient of the whole program is returned too
    (``finite_difference_gradient``). Returns a dict: ``loss``, ``gradient``, ``parameters``
    (names), ``terms``, ``term_values``, ``term_quantities``, linear-solve statistics.
    """
    inp = grad_input(source, **tables)
    th = None if theta is None else np.asarray(theta, dtype=float)
    return _core.grad(inp, th, int(threads), bool(verify))


def fit(source=None, *, callback=None, checkpoint="", resume=False, threads=0, **tables):
    """Fits a model to reference data (a `fit` workflow: path, dict or keyword tables).

    ``callback(iteration)`` is called after every iteration with a dict (iteration, loss,
    gradient_norm, validation_loss, seconds); returning True stops the fit at the end of that
    iteration (termination "interrupted"), False or None goes on, anything else is a TypeError.
    Files are not written; the result dict holds the
    initial and fitted parameters, losses, history and standard errors.
    """
    if isinstance(source, FitWorkflow):
        wf = source
    elif _is_path(source):
        wf = _core.read_fit(os.fspath(source))
    else:
        wf = _core.parse_fit(_document(source, tables, "fit"), _PYTHON_INPUT)
    return _core.fit(wf, _checked_callback(callback), os.fspath(checkpoint), bool(resume), int(threads))


def _checked_callback(callback):
    """The fit callback with its contract enforced: True stops, False or None goes on. Any other
    value (a NaN loss returned by mistake is truthy) is a TypeError, not a silent stop."""
    if callback is None:
        return None

    def checked(iteration):
        r = callback(iteration)
        if r is None or isinstance(r, (bool, np.bool_)):
            return bool(r)
        raise TypeError(f"the fit callback returned {r!r}; return True to stop the fit, False or None to go on")

    return checked


def exact(source=None, **tables):
    """Exact one- and two-electron solutions of line systems (`exact` input: path, dict or
    keyword tables). Returns one dict per system: energies (hartree), levels, density, the
    exact Kohn–Sham potential ``v_s`` and its parts on ``nodes`` (bohr)."""
    if isinstance(source, ExactInput):
        inp = source
    elif _is_path(source):
        inp = _core.read_exact(os.fspath(source))
    else:
        inp = _core.parse_exact(_document(source, tables, "exact"), _PYTHON_INPUT)
    return _core.exact(inp)


def invert(source=None, *, target=None, **tables):
    """Reconstructs the Kohn–Sham potential of a density (`invert` input: path, dict or
    keyword tables). ``target`` optionally gives the density as an array with columns x (or r,
    bohr) and the density (total, or one column per spin) instead of the input's table.
    Returns a dict with ``v_s``, ``v_xc``, ``v_hxc`` (per spin), the reached density, the
    density error and the levels."""
    if isinstance(source, InvertInput):
        inp = source
    elif _is_path(source):
        inp = _core.read_invert(os.fspath(source))
    else:
        inp = _core.parse_invert(_document(source, tables, "invert"), _PYTHON_INPUT)
    if target is not None:
        import numpy as np

        target = np.asarray(target, dtype=float)
        if target.ndim != 2:
            raise InputError("target: give a 2D array (rows of x and density)")
    return _core.invert(inp, target)
