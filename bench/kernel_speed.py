"""Speed of the register-machine kernel against hand-written code.

Prints a table: nanoseconds per right-hand-side evaluation for the model
kernel (engine.kernels.vm), hand-written numba and hand-written numpy called from
Python, and prepare() times. Run: ``PYTHONPATH=. python bench/kernel_speed.py``.
The random mechanisms are invented test data (seeded), not chemistry.
"""
from __future__ import annotations

import json
import time
from pathlib import Path

import numpy as np
from numba import njit

from engine.kernels import vm
from engine.model import clear_cache, prepare

ROOT = Path(__file__).resolve().parents[1]


def random_mechanism(n_species: int, n_reactions: int, seed: int = 0) -> dict:
    """Invented mass-action network: uni/bimolecular, some reversible, k log-uniform."""
    rng = np.random.default_rng(seed)
    names = [f"S{i}" for i in range(n_species)]
    reactions = []
    for j in range(n_reactions):
        kind = rng.integers(5)
        a, b, c, d = (names[i] for i in rng.choice(n_species, 4, replace=False))
        k = float(10 ** rng.uniform(-2, 4))
        eq = [f"{a} -> {b}", f"{a} + {b} -> {c}", f"{a} + {b} -> {c} + {d}", f"2 {a} -> {b}",
              f"{a} <=> {b} + {c}"][kind]
        item = {"equation": eq, "k": f"k{j}"}
        if kind == 4:
            item["k_reverse"] = float(10 ** rng.uniform(-2, 2))
        reactions.append(item)
    return {"title": f"Invented random mechanism {n_species}x{n_reactions} (seed {seed})",
            "states": {s: float(rng.uniform(0.1, 1.0)) for s in names},
            "parameters": {f"k{j}": float(10 ** rng.uniform(-2, 4)) for j in range(n_reactions)},
            "reactions": reactions}


def mechanism_arrays(model: dict):
    """Reactant index/order arrays and net stoichiometry triplets, for the hand-written codes."""
    prepared = prepare(model)
    index = {s: i for i, s in enumerate(prepared.state_names)}
    pidx = {p: i for i, p in enumerate(prepared.param_names)}
    terms, kf, kr = [], [], []
    for item in model["reactions"]:
        left, right = item["equation"].replace("<=>", "->").split("->")
        def side(text):
            out = []
            for part in text.split("+"):
                bits = part.split()
                if bits:
                    coef, name = (int(bits[0]), bits[1]) if len(bits) == 2 else (1, bits[0])
                    out.append((index[name], coef))
            return out
        terms.append((side(left), side(right)))
        kf.append(prepared.p[pidx[item["k"]]])
        kr.append(item.get("k_reverse", 0.0))
    m = len(terms)
    react = np.full((m, 4), -1, dtype=np.int64)  # species repeated by order, both directions
    prod = np.full((m, 4), -1, dtype=np.int64)
    for j, (left, right) in enumerate(terms):
        flat_l = [i for i, c in left for _ in range(c)]
        flat_r = [i for i, c in right for _ in range(c)]
        react[j, :len(flat_l)] = flat_l
        prod[j, :len(flat_r)] = flat_r
    return prepared, react, prod, np.array(kf), np.array(kr)


@njit(cache=True)
def _hand_mass_action(y, react, prod, kf, kr, out):
    out[:] = 0.0
    for j in range(react.shape[0]):
        rf = kf[j]
        for q in range(4):
            if react[j, q] >= 0:
                rf *= y[react[j, q]]
        rr = kr[j]
        if rr != 0.0:
            for q in range(4):
                if prod[j, q] >= 0:
                    rr *= y[prod[j, q]]
        r = rf - rr
        for q in range(4):
            if react[j, q] >= 0:
                out[react[j, q]] -= r
            if prod[j, q] >= 0:
                out[prod[j, q]] += r


@njit(cache=True)
def _hand_robertson(y, out):
    out[0] = -0.04 * y[0] + 1e4 * y[1] * y[2]
    out[1] = 0.04 * y[0] - 1e4 * y[1] * y[2] - 3e7 * y[1] * y[1]
    out[2] = 3e7 * y[1] * y[1]


@njit(cache=True)
def _loop_vm(kernel, y, p, regs, out, reps):
    for _ in range(reps):
        vm.rhs(kernel, 0.0, y, p, regs, out)
        y[0] += 1e-300 * out[0]  # keeps the compiler from hoisting the call out of the loop


@njit(cache=True)
def _loop_parts(kernel, y, p, regs, out, reps):
    code, consts, ma = kernel.rhs_code, kernel.consts, kernel.ma
    for _ in range(reps):
        vm.rhs_parts(code, consts, ma, 0.0, y, p, regs, out)
        y[0] += 1e-300 * out[0]


@njit(cache=True)
def _loop_robertson(y, out, reps):
    for _ in range(reps):
        _hand_robertson(y, out)
        y[0] += 1e-300 * out[0]


@njit(cache=True)
def _loop_mass_action(y, react, prod, kf, kr, out, reps):
    for _ in range(reps):
        _hand_mass_action(y, react, prod, kf, kr, out)
        y[0] += 1e-300 * out[0]


def numpy_mass_action(y, react, prod, kf, kr, n):
    yy = np.append(y, 1.0)  # index -1 reads 1.0
    r = kf * yy[react].prod(axis=1) - kr * yy[prod].prod(axis=1)
    out = np.zeros(n + 1)
    np.add.at(out, react.ravel(), -np.repeat(r, 4))
    np.add.at(out, prod.ravel(), np.repeat(r, 4))
    return out[:n]


def numpy_robertson(y):
    return np.array([-0.04 * y[0] + 1e4 * y[1] * y[2],
                     0.04 * y[0] - 1e4 * y[1] * y[2] - 3e7 * y[1] ** 2, 3e7 * y[1] ** 2])


def per_call(fn, reps, runs=50):
    """Best time per call over many short runs (the machine is shared: take the minimum)."""
    fn(1)
    best = np.inf
    for _ in range(runs):
        t0 = time.perf_counter()
        fn(reps)
        best = min(best, (time.perf_counter() - t0) / reps)
    return best * 1e9


def main():
    rows = []
    rob = prepare(json.loads((ROOT / "examples/models/robertson.json").read_text()))
    k, y = rob.kernel, np.array([0.9, 1e-5, 0.1])
    regs, out = np.zeros(k.n_regs), np.zeros(k.n)
    rows.append(("robertson 3x3", len(k.rhs_code),
                 per_call(lambda r: _loop_vm(k, y, rob.p, regs, out, r), 5000),
                 per_call(lambda r: _loop_parts(k, y, rob.p, regs, out, r), 5000),
                 per_call(lambda r: _loop_robertson(y, out, r), 5000),
                 per_call(lambda r: [numpy_robertson(y) for _ in range(r)], 500, 10)))
    for name in ("hires", "vanderpol", "tarnwhistle_hydrogenation"):
        pm = prepare(json.loads((ROOT / f"examples/models/{name}.json").read_text()))
        k, yv = pm.kernel, pm.y0 + 0.1
        regs, out = np.zeros(k.n_regs), np.zeros(k.n)
        rows.append((name, len(k.rhs_code),
                     per_call(lambda r: _loop_vm(k, yv, pm.p, regs, out, r), 5000),
                     per_call(lambda r: _loop_parts(k, yv, pm.p, regs, out, r), 5000),
                     np.nan, np.nan))
    for n, m in ((100, 300), (1000, 3000)):
        model = random_mechanism(n, m)
        prepared, react, prod, kf, kr = mechanism_arrays(model)
        k = prepared.kernel
        yv, regs, out = prepared.y0.copy(), np.zeros(k.n_regs), np.zeros(k.n)
        check = np.zeros(n)
        vm.rhs(k, 0.0, yv, prepared.p, regs, out)
        _hand_mass_action(yv, react, prod, kf, kr, check)
        assert np.allclose(out, check, rtol=1e-12, atol=1e-12 * np.abs(check).max())
        rows.append((f"random {n}x{m}", len(k.rhs_code),
                     per_call(lambda r: _loop_vm(k, yv, prepared.p, regs, out, r), max(10, 20000 // n)),
                     per_call(lambda r: _loop_parts(k, yv, prepared.p, regs, out, r), max(10, 20000 // n)),
                     per_call(lambda r: _loop_mass_action(yv, react, prod, kf, kr, out, r), max(10, 20000 // n)),
                     per_call(lambda r: [numpy_mass_action(yv, react, prod, kf, kr, n)
                                         for _ in range(r)], 20, 10)))
    print("ns per right-hand side; vm = vm.rhs(kernel, ...), parts = vm.rhs_parts(arrays, ...),")
    print("numba / numpy = hand-written code (numpy called from Python). instr = rhs program length.")
    print(f"{'model':18s} {'instr':>7s} {'vm':>9s} {'parts':>9s} {'numba':>9s} {'numpy':>9s}"
          f" {'vm/numba':>8s} {'numpy/vm':>8s}")
    for name, ni, t_vm, t_pa, t_nb, t_np in rows:
        print(f"{name:18s} {ni:7d} {t_vm:9.0f} {t_pa:9.0f} {t_nb:9.0f} {t_np:9.0f} "
              f"{t_vm / t_nb:8.2f} {t_np / t_vm:8.1f}")
    print()
    for n, m in ((10, 20), (100, 300), (1000, 3000)):
        model = random_mechanism(n, m, seed=7)
        best = np.inf
        for _ in range(3):  # best of three, cache emptied each time
            clear_cache()
            t0 = time.perf_counter()
            prepared = prepare(model)
            best = min(best, time.perf_counter() - t0)
        print(f"prepare random {n}x{m}: {1e3 * best:8.1f} ms "
              f"(jacobian nnz {len(prepared.kernel.jac_rows)}, "
              f"instructions {sum(len(c) for c in (prepared.kernel.rhs_code, prepared.kernel.jac_code))}, "
              f"laws {len(prepared.conservation)})")
    hostile = ["(" * 10_000 + "A" + ")" * 10_000, "-" * 100_000 + "A", "1" * 5000, "9**9**9",
               "A.__class__", "(lambda: 1)()", "x[0]", "'s'", "open(A)"]
    from engine.model import check_model
    worst = 0.0
    for text in hostile:
        t0 = time.perf_counter()
        assert check_model({"states": {"A": 1.0}, "ddt": {"A": text}})
        worst = max(worst, time.perf_counter() - t0)
    print(f"slowest hostile-input rejection: {1e3 * worst:.2f} ms")


if __name__ == "__main__":
    main()
