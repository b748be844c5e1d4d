"""The command line imports only what the command being run uses."""
from __future__ import annotations

import json
import subprocess
import sys
from pathlib import Path

import pytest

from audit import cli

ROOT = Path(__file__).resolve().parents[1]
#: Libraries that take seconds to import between them (python -X importtime, common practice
#: for measuring import cost) and that the overview of the commands never uses.
HEAVY = ("matplotlib", "scipy", "sympy", "numba", "joblib", "numdifftools", "dask", "rich", "numpy")


def modules_loaded_by(*argv: str) -> set[str]:
    """Top-level packages in sys.modules after ``fitaudit ARGV`` in a fresh interpreter."""
    script = ("import json, sys\nfrom audit.cli import main\n"
              f"try:\n    main({list(argv)!r})\nexcept SystemExit:\n    pass\n"
              "print(json.dumps(sorted({name.split('.')[0] for name in sys.modules})))\n")
    done = subprocess.run([sys.executable, "-c", script], cwd=ROOT, capture_output=True, text=True, check=True)
    return set(json.loads(done.stdout.splitlines()[-1]))


def test_the_overview_of_the_commands_loads_no_heavy_library():
    assert modules_loaded_by("--help").isdisjoint(HEAVY)


def test_a_command_loads_its_own_module_and_no_other_command():
    script = ("import sys\nfrom audit.cli import main\n"
              "try:\n    main(['check', '--help'])\nexcept SystemExit:\n    pass\n"
              "print(sorted(name for name in sys.modules if name.startswith('audit.cli.')))\n")
    done = subprocess.run([sys.executable, "-c", script], cwd=ROOT, capture_output=True, text=True, check=True)
    loaded = done.stdout.splitlines()[-1]
    assert "audit.cli.check" in loaded
    assert not any(f"audit.cli.{name}'" in loaded for name in cli.COMMANDS if name != "check")


@pytest.mark.parametrize("name", sorted(cli.COMMANDS))
def test_each_summary_in_the_overview_is_the_one_its_command_registers(name):
    parser = cli.build_parser(name)
    choices = parser._subparsers._group_actions[0]._choices_actions
    registered = {action.dest: action.help for action in choices}
    assert registered[name] == cli.COMMANDS[name]


def submodules_loaded_by(script: str, prefix: str) -> set[str]:
    """Modules under ``prefix`` in sys.modules after ``script`` ran in a fresh interpreter."""
    script += f"\nimport json, sys\nprint(json.dumps(sorted(n for n in sys.modules if n.startswith({prefix!r}))))\n"
    done = subprocess.run([sys.executable, "-c", script], cwd=ROOT, capture_output=True, text=True, check=True)
    return set(json.loads(done.stdout.splitlines()[-1]))


def test_a_cached_sobol_sweep_and_a_sweep_worker_import_no_design_generator(tmp_path):
    # scipy.stats (whose qmc module makes the Sobol' points) takes about a second to import
    # (python -X importtime): the points are made once, by the process that hands out the chunks.
    sweep = ["sweep", "probe-cooling", "--starts", "64", "--resolution", "4", "--step-factors", "1",
             "--jobs", "1", "-o", str(tmp_path), "--json"]
    run = f"from audit.cli import main\ntry:\n    main({sweep!r})\nexcept SystemExit:\n    pass\n"
    assert "scipy.stats" in submodules_loaded_by(run, "scipy.stats")          # the first run makes the points
    assert not submodules_loaded_by(run, "scipy.stats")                        # the rerun reads them back
    worker = ("from audit.inputs.scenario import load_scenario\nfrom audit.sweep.chunk import ChunkWork\n"
              "from audit.sweep.solutions import SolutionTolerance\n"
              "from audit.sweep.starts import make_design, search_space\nimport numpy as np\n"
              "scenario = load_scenario('scenarios/probe-cooling')\n"
              "design = make_design(search_space(scenario), 'sobol', 64, 1)\n"
              "work = ChunkWork(problem=scenario.problem, design=design, step_factors=(1.0,), methods=('gn',),\n"
              "                 tolerance=1e-8, max_iterations=50,\n"
              "                 solution_tolerance=SolutionTolerance.for_problem(scenario.problem, 1e-8))\n"
              "chunk = work(((0, 4), np.full((4, 3), 0.5)))\n"
              "assert chunk['outcome'].shape == (1, 1, 4)\n")
    assert not submodules_loaded_by(worker, "scipy.stats")


def test_a_sweep_on_two_workers_draws_its_figures_there_and_never_imports_matplotlib_here(tmp_path):
    # matplotlib takes about a second to import (python -X importtime); the workers the sweep
    # started import it side by side while this process waits, instead of this one first.
    sweep = ["sweep", "probe-cooling", "--starts", "64", "--resolution", "4", "--step-factors", "1",
             "--jobs", "2", "-o", str(tmp_path), "--json"]
    run = f"from audit.cli import main\ntry:\n    main({sweep!r})\nexcept SystemExit:\n    pass\n"
    assert not submodules_loaded_by(run, "matplotlib")
    drawn = sorted(path.name for path in (tmp_path / "figures").glob("*.png"))
    assert drawn == ["sweep-basins-dT-tau.png", "sweep-cases-map-dT-tau.png", "sweep-cases.png",
                     "sweep-iterations-dT-tau.png", "sweep-outcomes.png"]


def test_a_run_whose_figures_go_to_workers_and_its_cached_rerun_never_import_matplotlib_here(tmp_path):
    # A fresh quick audit has every stage's figures to draw: they go to the two workers, which import
    # matplotlib side by side while this process waits. Its rerun into the same folder finds every
    # figure drawn and draws none (figures.drawn_once), on one job as well.
    audit = ["run", "probe-cooling", "--quick", "--step-factors", "1", "-o", str(tmp_path), "--json"]
    for jobs in ("2", "1"):
        argv = [*audit, "--jobs", jobs]
        run = f"from audit.cli import main\ntry:\n    main({argv!r})\nexcept SystemExit:\n    pass\n"
        loaded = {name.split(".")[0] for name in submodules_loaded_by(run, "")}
        assert "matplotlib" not in loaded, f"--jobs {jobs}"
    # The rerun also reads the derivative check's exact reference back from the cache
    # (derivatives.exact): no computer algebra, so no sympy (about a second to import).
    assert "sympy" not in loaded
    drawn = {path.name for path in (tmp_path / "figures").glob("*.png")}
    assert {"derivatives-points.png", "bootstrap-histograms.png", "identifiability-profiles.png", "residuals.png",
            "fit-band.png", "sweep-outcomes.png"} <= drawn
