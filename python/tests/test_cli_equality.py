"""Every shipped workflow gives the same numbers from Python as from the command line.

The command line writes its JSON with 17 significant digits and its CSV tables with 13; both
sides run the same library on the same input, so JSON values must agree to 1e-12 relative and
CSV columns to their printed precision. Run by ctest with STILLPOINT_CLI pointing at the
program (about a minute: every workflow runs twice).
"""
import csv
import json
import os
import pathlib
import subprocess

import numpy as np
import pytest

import stillpoint as sp

ROOT = pathlib.Path(__file__).resolve().parents[2]
WORKFLOWS = ROOT / "workflows"
CLI = os.environ.get("STILLPOINT_CLI", str(ROOT / "build" / "stillpoint"))

JSON_RTOL = 1e-12
CSV_RTOL = 2e-12  # %.12e: half a unit in the 13th digit is 5e-13 relative; margin for the sum of spins


def workflows(command):
    return sorted(p.name for p in WORKFLOWS.glob(command + "-*.toml"))


def run_cli(command, workflow, out, *extra):
    r = subprocess.run([CLI, command, str(WORKFLOWS / workflow), "-q", "-o", str(out), *extra], cwd=ROOT,
                       capture_output=True, text=True, timeout=600,
                       env=dict(os.environ, OPENBLAS_NUM_THREADS="1"))
    assert r.returncode == 0, r.stderr
    return r.stdout


def close(a, b, rtol=JSON_RTOL, atol=1e-14):
    return np.testing.assert_allclose(np.asarray(a, dtype=float), np.asarray(b, dtype=float), rtol=rtol, atol=atol)


def read_csv(path):
    with open(path) as f:
        rows = [r for r in csv.reader(line for line in f if not line.startswith("#"))]
    header, data = rows[0], np.array(rows[1:], dtype=float)
    return {name: data[:, k] for k, name in enumerate(header)}


def rows_at_nodes(nodes, position):
    """Indices of the grid nodes that the rows of a table were written at."""
    nodes = np.asarray(nodes)
    at = np.searchsorted(nodes, position - 1e-9 * np.maximum(1.0, np.abs(position)))
    close(nodes[at], position, rtol=CSV_RTOL)
    return at


def as_list(x):
    return x if isinstance(x, list) else [x]


@pytest.mark.parametrize("workflow", workflows("solve"))
def test_solve(workflow, tmp_path):
    run_cli("solve", workflow, tmp_path)
    states = as_list(sp.solve(WORKFLOWS / workflow))
    assert states
    for s in states:
        j = json.load(open(tmp_path / (s.name + ".json")))
        parts = dict(s.energy)
        kinds = [t["kind"] for t in s.xc_terms]
        if all(k in ("exchange", "correlation") for k in kinds):  # the CLI's split, same rule
            for k in ("exchange", "correlation"):
                parts[k] = sum(t["energy"] for t in s.xc_terms if t["kind"] == k)
        assert sorted(parts) == sorted(j["energy"])
        for part, value in j["energy"].items():
            close(parts[part], value)
        close([t["energy"] for t in s.xc_terms], [t["energy"] for t in j["xc_terms"]])
        assert [lv["label"] for lv in s.levels] == [lv["label"] for lv in j["levels"]]
        close([lv["energy"] for lv in s.levels], [lv["energy"] for lv in j["levels"]])
        close([lv["occupation"] for lv in s.levels], [lv["occupation"] for lv in j["levels"]])
        table = read_csv(tmp_path / (s.name + "_density.csv"))
        position = table.get("x_bohr", table.get("r_bohr"))
        density = table.get("n_per_bohr", table.get("n_per_bohr3"))
        # The atom tables leave out the node at r = 0 (where 1/r terms of the potentials are not
        # defined); match the rows to the nodes they were written for.
        at = rows_at_nodes(s.nodes, position)
        close(np.asarray(s.total_density)[at], density, rtol=CSV_RTOL, atol=1e-24)


@pytest.mark.parametrize("workflow", workflows("grad"))
def test_grad(workflow, tmp_path):
    run_cli("grad", workflow, tmp_path)
    j = json.load(open(tmp_path / "grad.json"))
    r = sp.grad(WORKFLOWS / workflow)
    close(r["loss"], j["loss"])
    assert r["parameters"] == [p["name"] for p in j["parameters"]]
    close(r["gradient"], [p["gradient"] for p in j["parameters"]])
    close(r["theta"], [p["value"] for p in j["parameters"]])
    assert r["linear_solves"] == j["linear_solves"]


@pytest.mark.parametrize("workflow", workflows("fit"))
def test_fit(workflow, tmp_path):
    run_cli("fit", workflow, tmp_path)
    j = json.load(open(tmp_path / "fit.json"))
    r = sp.fit(WORKFLOWS / workflow)
    assert r["termination"] == j["termination"]
    assert r["iterations"] == j["iterations"]
    assert r["evaluations"] == j["evaluations"]
    assert r["parameters"] == [p["name"] for p in j["parameters"]]
    close(r["initial"], [p["initial"] for p in j["parameters"]])
    close(r["fitted"], [p["fitted"] for p in j["parameters"]])
    close(r["initial_loss"], j["loss"]["training"]["initial"])
    close(r["loss"], j["loss"]["training"]["fitted"], atol=1e-20)


def test_check(tmp_path):
    table = ROOT / "basis-data" / "reference" / "nist-lda-lsd.csv"
    r = subprocess.run([CLI, "check", str(table), "-q", "--report", str(tmp_path / "check.json")], cwd=ROOT,
                       capture_output=True, text=True, timeout=600)
    assert r.returncode == 0, r.stderr
    j = json.load(open(tmp_path / "check.json"))
    p = sp.check(table)
    assert len(p["rows"]) == len(j["results"]) == p["checked"]
    for a, b in zip(p["rows"], j["results"]):
        assert (a["symbol"], a["charge"], a["approximation"], a["quantity"], a["passed"]) == (
            b["symbol"], b["charge"], b["approximation"], b["quantity"], b["passed"])
        close(a["computed"], b["computed"])


@pytest.mark.parametrize("workflow", workflows("exact"))
def test_exact(workflow, tmp_path):
    run_cli("exact", workflow, tmp_path)
    results = sp.exact(WORKFLOWS / workflow)
    assert results
    for e in results:
        j = json.load(open(tmp_path / (e["name"] + ".json")))
        for part, value in j["energy"].items():
            if part in e["energy"]:
                close(e["energy"][part], value)
        close(e["homo"], j["homo"])
        close([lv["energy"] for lv in e["levels"]], [lv["energy"] for lv in j["levels"]])
        table = read_csv(tmp_path / (e["name"] + "_density.csv"))
        density = next(v for k, v in table.items() if k.startswith("n_"))
        close(e["density"], density, rtol=CSV_RTOL, atol=1e-24)


@pytest.mark.parametrize("workflow", workflows("invert"))
def test_invert(workflow, tmp_path):
    run_cli("invert", workflow, tmp_path)
    (report,) = tmp_path.glob("*_inversion.json")
    j = json.load(open(report))
    r = sp.invert(WORKFLOWS / workflow)
    assert r["iterations"] == j["iterations"]
    close(r["homo"], j["homo"])
    close(r["density_max"], j["density_error"]["maximum"])
    close([lv["energy"] for lv in r["levels"]], [lv["energy"] for lv in j["levels"]])
    table = read_csv(report.with_suffix(".csv"))
    at = rows_at_nodes(r["nodes"], table.get("x_bohr", table.get("r_bohr")))
    v_s = np.asarray(r["v_s"])[0][at]
    close(v_s, next(v for k, v in table.items() if k.startswith("v_s")), rtol=CSV_RTOL, atol=1e-12)
