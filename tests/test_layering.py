"""One direction of dependency: service -> schemas <- worker; engine imports no service code.

The imports of every module are read from its source (no import side effects); one test
also imports the API in a fresh interpreter and checks that numba never loads there.
"""
import ast
import subprocess
import sys
from pathlib import Path

import pytest

ROOT = Path(__file__).resolve().parent.parent
PACKAGES = ["engine", "sweeps", "calibration", "schemas", "jobs", "service", "worker", "cli"]
FORBIDDEN = {
    "engine": {"flask", "celery", "redis", "kombu", "schemas", "service", "worker", "jobs", "cli", "sweeps",
               "calibration"},
    "sweeps": {"flask", "celery", "redis", "numba", "engine", "schemas", "service", "worker", "jobs", "cli"},
    # parameter estimation: pure numerics on the engine (numpy, scipy), no service machinery
    "calibration": {"flask", "celery", "redis", "kombu", "marshmallow", "schemas", "service", "worker",
                    "jobs", "cli", "sweeps"},
    "schemas": {"flask", "celery", "redis", "numba", "service", "worker", "jobs", "cli"},
    "jobs": {"flask", "service", "worker", "cli", "engine", "numba", "calibration"},
    "service": {"worker", "celery", "cli", "engine", "numba"},
    "worker": {"service", "flask", "cli"},
    "cli": {"service", "worker"},
}
# Dotted prefixes a package may not import although their root is allowed.
FORBIDDEN_MODULES = {
    # the API validates with the model language only: no compiled kernels, no integrators
    "schemas": ("engine.model", "engine.integrate", "engine.kernels", "engine.integrators",
                "engine.diagnostics", "engine.warmup"),
}
# Single modules the API process may import: only the numba-free parts of the engine.
API_SAFE_MODULES = {
    "calibration/problem.py": ("engine.model", "engine.integrate", "engine.kernels", "engine.integrators",
                               "engine.diagnostics", "engine.warmup", "engine.sensitivities", "numba",
                               "calibration.fit"),
}
# Inside the engine: the model language knows nothing of kernels or integrators.
ENGINE_LAYERS = {
    "engine/language": ("engine.kernels", "engine.integrators", "engine.diagnostics", "engine.model",
                        "engine.integrate", "numba"),
    "engine/kernels": ("engine.integrators", "engine.diagnostics", "engine.integrate"),
}


def imported_modules(path: Path) -> set[str]:
    tree = ast.parse(path.read_text())
    mods = set()
    for node in ast.walk(tree):
        if isinstance(node, ast.Import):
            mods |= {a.name for a in node.names}
        elif isinstance(node, ast.ImportFrom) and node.module and node.level == 0:
            mods.add(node.module)
            mods |= {f"{node.module}.{a.name}" for a in node.names}
    return mods


def offenders(folder: str, roots: set, prefixes: tuple) -> dict:
    found = {}
    for path in (ROOT / folder).rglob("*.py"):
        mods = imported_modules(path)
        bad = {m for m in mods if m.split(".")[0] in roots}
        bad |= {m for m in mods for pre in prefixes if m == pre or m.startswith(pre + ".")}
        if bad:
            found[str(path.relative_to(ROOT))] = sorted(bad)
    return found


@pytest.mark.parametrize("package", PACKAGES)
def test_package_imports_respect_the_layering(package):
    assert offenders(package, FORBIDDEN[package], FORBIDDEN_MODULES.get(package, ())) == {}


@pytest.mark.parametrize("folder", sorted(ENGINE_LAYERS))
def test_engine_layers_point_one_way(folder):
    assert offenders(folder, set(), ENGINE_LAYERS[folder]) == {}


@pytest.mark.parametrize("module", sorted(API_SAFE_MODULES))
def test_api_safe_modules_import_no_compiled_engine(module):
    mods = imported_modules(ROOT / module)
    prefixes = API_SAFE_MODULES[module]
    assert sorted(m for m in mods for pre in prefixes if m == pre or m.startswith(pre + ".")) == []


def test_checking_a_calibration_problem_never_loads_numba():
    code = ("import sys, numpy as np; from calibration.problem import Problem, Experiment, Unknown, check; "
            "m = {'states': {'a': 1}, 'parameters': {'k': 1}, 'ddt': {'a': '-k*a'}}; "
            "e = Experiment('e', (0, 1), np.array([0.5]), {'a': np.array([0.6])}); "
            "print(check(Problem(m, (e,), {'a': 'a'}, {}, (Unknown('k', 0.1, 10),))), 'numba' in sys.modules)")
    out = subprocess.run([sys.executable, "-c", code], cwd=ROOT, capture_output=True, text=True, timeout=120)
    assert out.returncode == 0, out.stderr
    assert out.stdout.split() == ["[]", "False"]


def test_the_api_process_never_loads_numba():
    code = ("import sys; import service.app, schemas.job, schemas.batch, service.batches_api; "
            "import service.calibrations_api, schemas.calibration, calibration.problem; "
            "from schemas.job import describe_model; "
            "describe_model({'states': {'a': 1}, 'reactions': [{'equation': 'a -> ', 'k': 1}]}); "
            "from tests.service.calibration_specs import decay_spec; "
            "spec = schemas.calibration.CalibrationSpecSchema().load(decay_spec()); "
            "calibration.problem.check(schemas.calibration.problem_of(spec).problem); "
            "print('numba' in sys.modules, 'engine.kernels.vm' in sys.modules)")
    out = subprocess.run([sys.executable, "-c", code], cwd=ROOT, capture_output=True, text=True, timeout=120)
    assert out.returncode == 0, out.stderr
    assert out.stdout.split() == ["False", "False"]
