"""The [domain_wall] section, its tasks, and `qmc analyze` on domain-wall runs and on small runs.

Configuration errors must name the file, the key and the problem (exit code 2 from the CLI).  The
analysis checks use invented numbers (test data, not physics): kappa = (E_wall - E_ref)/L_y with errors
combined in quadrature, and power-law fits of data made from a known power law.
"""

from __future__ import annotations

import json
import zlib
from pathlib import Path
from types import SimpleNamespace

import numpy as np
import pytest
from click.testing import CliRunner

from qmc.analysis import analyze_run
from qmc.analysis.powerlaw import fit_power_law
from qmc.analysis.walls import wall_energies
from qmc.cli.main import cli
from qmc.config.parser import build_model, load_config
from qmc.errors import UserError
from qmc.run.task_identity import task_fingerprint

STRIP_CONFIG = """
[run]
seed = 3
output = "run"
[lattice]
kind = "square"
size = ["L", 4]
boundary = ["open", "periodic"]
[[terms]]
type = "heisenberg"
bonds = "nn"
coupling = "J"
[[terms]]
type = "projector-product"
shape = "column-of-three"
coupling = 1.0
[scan]
L = [4, 6]
J = [0.5]
beta = 2
[sampling]
warmup_steps = 50
measure_steps = 400
bins = 4
"""
WALLS = '\n[domain_wall]\nwalls = ["pi", "pi/2"]\npin = 2.0\n'


def _write(tmp_path: Path, text: str) -> Path:
    path = tmp_path / "walls.toml"
    path.write_text(text)
    return path


def test_every_point_gives_the_reference_the_walls_and_the_second_reference(tmp_path):
    tasks = load_config(_write(tmp_path, STRIP_CONFIG + WALLS)).tasks()
    assert [t.task_id for t in tasks[:4]] == ["L4_J0.5_beta2_wall-none_c0", "L4_J0.5_beta2_wall-pi2_c0",
                                              "L4_J0.5_beta2_wall-pi_c0", "L4_J0.5_beta2_wall-nonex_c0"]
    assert [t.params["wall"] for t in tasks[:4]] == ["none", "pi/2", "pi", "none-x"]
    assert len(tasks) == 8 and len({t.seed_key for t in tasks}) == 8
    assert all(t.boundary == ("open", "periodic") for t in tasks)
    models = [build_model(t) for t in tasks[:4]]
    assert len({m.term_coupling.tobytes() for m in models}) == 4  # the tasks differ in their edges only
    assert all(m.n_terms == models[0].n_terms for m in models)


def test_the_pin_enters_the_task_identity_and_the_fingerprint(tmp_path):
    a = load_config(_write(tmp_path, STRIP_CONFIG + WALLS))
    b = load_config(_write(tmp_path, STRIP_CONFIG + WALLS.replace("2.0", "3.0")))
    assert a.fingerprint() != b.fingerprint()
    assert task_fingerprint(a.tasks()[0]) != task_fingerprint(b.tasks()[0])
    plain = load_config(_write(tmp_path, STRIP_CONFIG))
    assert [t.task_id for t in plain.tasks()] == ["L4_J0.5_beta2_c0", "L6_J0.5_beta2_c0"]
    assert "wall" not in plain.tasks()[0].params


@pytest.mark.parametrize("change, key, words", [
    (("walls = [\"pi\", \"pi/2\"]", "walls = \"pi\""), "domain_wall.walls", ["non-empty list"]),
    (("walls = [\"pi\", \"pi/2\"]", "walls = [\"pi\", \"pi/4\"]"), "domain_wall.walls[1]", ["unknown wall"]),
    (("walls = [\"pi\", \"pi/2\"]", "walls = [\"pi\", \"pi\"]"), "domain_wall.walls[1]", ["listed twice"]),
    (("pin = 2.0", "pin = -1.0"), "domain_wall.pin", ["must be positive"]),
    (("pin = 2.0", "pattern = \"plaquette\""), "domain_wall.pattern", ["unknown wall pattern"]),
    (("pin = 2.0", "pni = 2.0"), "domain_wall.pni", ["unknown key", "did you mean 'pin'"]),
    (("boundary = [\"open\", \"periodic\"]", "boundary = \"open\""), "lattice.boundary",
     ["needs kind = \"square\" with boundary"]),
    (("boundary = [\"open\", \"periodic\"]", "boundary = [\"open\"]"), "lattice.boundary",
     ["needs 2 boundary entries"]),
    (("L = [4, 6]", "L = [4, 5]"), "lattice.size[0]", ["even length of at least 4"]),
    (("size = [\"L\", 4]", "size = [\"L\", 2]"), "lattice.size[1]", ["at least 4"]),
])
def test_bad_domain_wall_input_is_named(tmp_path, change, key, words):
    text = (STRIP_CONFIG + WALLS).replace(*change)
    assert text != STRIP_CONFIG + WALLS
    with pytest.raises(UserError) as err:
        load_config(_write(tmp_path, text))
    assert err.value.where.endswith(key), err.value.where
    for w in words:
        assert w in err.value.message, err.value.message


PROJECTOR = STRIP_CONFIG.replace('type = "heisenberg"', 'type = "projector"')


@pytest.mark.parametrize("text, key, words", [
    (PROJECTOR + '[model]\ncolors = 3\n' + WALLS, "model.colors", ["needs colors = 2", "not 3"]),
    (PROJECTOR.replace("J = [0.5]", "J = [0.5]\nN = [2, 3]") + '[model]\ncolors = "N"\n' + WALLS,
     "model.colors", ["needs colors = 2", "not 3 (for L=4, J=0.5, N=3"]),
    (STRIP_CONFIG.replace('type = "heisenberg"', 'type = "xxz"\ndelta = 0.5') + WALLS, "terms[0].type",
     ["cannot be combined with xxz terms", "directed loops"]),
    (STRIP_CONFIG + '[[terms]]\ntype = "field"\ncoupling = 0.1\n' + WALLS, "terms[2].type",
     ["cannot be combined with field terms"]),
])
def test_domain_walls_refuse_su_n_and_directed_loop_models(tmp_path, text, key, words):
    """The edges and profiles are made (and checked against exact diagonalization) for S = 1/2 models of
    singlet projectors; SU(N) colours and xxz/field terms are refused by name, also from the CLI."""
    with pytest.raises(UserError) as err:
        load_config(_write(tmp_path, text))
    assert err.value.where.endswith(key), err.value.where
    for w in words:
        assert w in err.value.message, err.value.message
    result = CliRunner().invoke(cli, ["validate", str(_write(tmp_path, text))])
    assert result.exit_code == 2 and "Traceback" not in result.output


def test_domain_walls_with_a_ground_state_search(tmp_path):
    """[ground_state] with [domain_wall]: every wall task doubles its own beta; the analysis still pairs each
    wall with its reference (no beta in the parameters)."""
    text = (STRIP_CONFIG.replace("L = [4, 6]", "L = [4]").replace("beta = 2\n", "")
            + WALLS.replace('["pi", "pi/2"]', '["pi"]')
            + "[ground_state]\nstart_beta = 1.0\nmax_beta = 4.0\n")
    config = load_config(_write(tmp_path, text))
    assert [t.task_id for t in config.tasks()] == ["L4_J0.5_wall-none_c0", "L4_J0.5_wall-pi_c0"]
    assert all(t.ground_state is not None and t.beta == 1.0 for t in config.tasks())
    runner = CliRunner()
    assert runner.invoke(cli, ["run", str(_write(tmp_path, text)), "--quiet"]).exit_code == 0
    result = runner.invoke(cli, ["analyze", str(tmp_path / "run"), "--json"])
    assert result.exit_code == 0, result.output
    (entry,) = json.loads(result.output)["domain_wall"]
    assert entry["wall"] == "pi" and np.isfinite(entry["kappa"]) and entry["kappa_err"] > 0


def test_domain_walls_refuse_replica_exchange(tmp_path):
    text = STRIP_CONFIG.replace("J = [0.5]", "J = [0.5, 0.6]") + WALLS + '[exchange]\nalong = "J"\n'
    with pytest.raises(UserError, match="cannot be combined with"):
        load_config(_write(tmp_path, text))
    result = CliRunner().invoke(cli, ["validate", str(_write(tmp_path, text))])
    assert result.exit_code == 2 and "Traceback" not in result.output


# ------------------------------------------------------------------------------------------ analysis


def _task(L, wall, energy, err, Ly=4, J=0.5):
    # a seed fixed by the arguments: hash() of a string changes from one process to the next
    rng = np.random.default_rng([L, zlib.crc32(wall.encode()), round(1000 * J)])
    noise = rng.standard_normal(400)
    noise = (noise - noise.mean()) / noise.std(ddof=1)  # exact mean and standard error
    bins = {"energy": energy + err * np.sqrt(400) * noise}
    params = {"L": L, "J": J, "beta": 2.0, "wall": wall, "copy": 0, "size": [L, Ly]}
    return SimpleNamespace(task_id=f"L{L}_J{J}_wall-{wall}", params=params, bins=bins, steps_per_bin=10,
                           n_sites=L * Ly,
                           linear_size=L, beta=2.0, vbs_histogram=None, vbs_hist_range=None, status="done",
                           exchange=None)


def test_kappa_is_the_energy_difference_per_length_with_errors_in_quadrature():
    from qmc.analysis.scan import scan_points
    from qmc.analysis.summary import summarize_task

    tasks = [_task(6, "none", -0.50, 1e-3), _task(6, "none-x", -0.60, 2e-3), _task(6, "pi", -0.48, 1e-3),
             _task(6, "pi/2", -0.54, 3e-3)]
    points = scan_points([summarize_task(t) for t in tasks], "J")
    entries, warnings = wall_energies(points)
    assert not warnings
    by_wall = {e["wall"]: e for e in entries}
    N, Ly = 24, 4
    assert by_wall["pi"]["kappa"] == pytest.approx(N * (-0.48 + 0.50) / Ly, rel=1e-6)
    assert by_wall["pi"]["kappa_err"] == pytest.approx(N * np.hypot(1e-3, 1e-3) / Ly, rel=0.05)
    assert by_wall["pi/2"]["kappa"] == pytest.approx(N * (-0.54 + 0.55) / Ly, rel=1e-6)
    assert by_wall["pi/2"]["kappa_err"] == pytest.approx(N * np.sqrt(9e-6 + (1e-6 + 4e-6) / 4) / Ly, rel=0.05)
    assert set(by_wall["pi"]) >= {"L", "params", "wall", "kappa", "kappa_err"}
    assert "wall" not in by_wall["pi"]["params"] and by_wall["pi"]["L"] == 6


def test_a_wall_without_its_references_is_reported():
    from qmc.analysis.scan import scan_points
    from qmc.analysis.summary import summarize_task

    points = scan_points([summarize_task(t) for t in [_task(6, "none", -0.5, 1e-3),
                                                      _task(6, "pi/2", -0.5, 1e-3)]], None)
    entries, warnings = wall_energies(points)
    assert entries == [] and "no reference task (none-x)" in warnings[0]


def test_power_law_fit_recovers_a_known_exponent():
    L = np.array([8.0, 12.0, 16.0, 24.0])
    exact = fit_power_law(L, 2.0 * L**-1.5, 1e-3 * np.ones(4))
    assert exact.ok and exact.exponent == pytest.approx(1.5, abs=1e-6)
    rng = np.random.default_rng(5)
    err = 0.02 * 2.0 * L**-1.5
    noisy = fit_power_law(L, 2.0 * L**-1.5 + err * rng.standard_normal(4), err)
    assert noisy.ok and abs(noisy.exponent - 1.5) < 4 * noisy.exponent_err and noisy.exponent_err < 0.2
    two = fit_power_law(L[:2], [1.0, 0.5], [0.1, 0.1])
    assert not two.ok and "needs at least 3" in two.note


def test_analyze_reports_kappa_and_fits_from_three_sizes(tmp_path):
    tasks = []
    for L in (8, 12, 16):
        kappa = 0.3 * L**-0.5  # invented power law, exponent 0.5
        e_none = -0.5
        tasks += [_task(L, "none", e_none, 1e-5), _task(L, "pi", e_none + kappa * 4 / (4 * L), 1e-5)]
    result = analyze_run(tasks, tmp_path / "a", plot=True)
    assert [e["L"] for e in result["domain_wall"]] == [8, 12, 16]
    fit = result["domain_wall_fits"][0]["fit"]
    assert fit["ok"] and fit["exponent"] == pytest.approx(0.5, abs=0.05)
    assert (tmp_path / "a" / "domain_wall.csv").exists() and (tmp_path / "a" / "plots" / "kappa.png").exists()


def test_analyze_says_why_there_is_no_fit_with_two_sizes(tmp_path):
    tasks = [_task(L, w, -0.5 + 0.01 * (w == "pi"), 1e-4) for L in (8, 12) for w in ("none", "pi")]
    result = analyze_run(tasks, tmp_path / "a")
    assert not result["domain_wall_fits"][0]["fit"]["ok"]
    assert any("no power-law fit (2 sizes with data" in w for w in result["warnings"])


@pytest.mark.parametrize("scan", ["L = [4]\nJ = [0.5, 0.6]", "L = [4, 6]\nJ = [0.5]", "L = [4]\nJ = [0.5]"])
def test_qmc_analyze_exits_0_on_a_single_size_or_coupling(tmp_path, scan):
    text = STRIP_CONFIG.replace("L = [4, 6]\nJ = [0.5]", scan) + WALLS
    config = _write(tmp_path, text)
    runner = CliRunner()
    assert runner.invoke(cli, ["run", str(config), "--quiet"]).exit_code == 0
    result = runner.invoke(cli, ["analyze", str(tmp_path / "run"), "--json", "--plot"])
    assert result.exit_code == 0, result.output
    data = json.loads(result.output)
    assert {e["wall"] for e in data["domain_wall"]} == {"pi", "pi/2"}
    assert all(np.isfinite(e["kappa"]) and e["kappa_err"] > 0 for e in data["domain_wall"])
    assert (tmp_path / "run" / "analysis" / "profiles.csv").exists()
