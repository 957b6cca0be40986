"""Machine-code tier for a model's right-hand side and Jacobian values.

The register machine (``engine.kernels.vm``) runs every model without compiling per model,
at about 2 ns per instruction. A model evaluated many times (a sweep, a long
solve) can instead have its right-hand side, Jacobian and event programs
translated into one straight-line numba ``cfunc`` each, several times faster per
call (see docs/engine.md, "Machine-code tier"). Derived quantities, evaluated only
at output times, stay interpreted.

The translation reads only the compiled program: integer opcodes, register
indices and float constants. No text from the model ever reaches the generated
source (names and expressions stay behind in the parser), and every operation is
spelled with the same helper the interpreter uses, in the same order, so values
are bit-identical to the interpreter's.

Generated modules are written to ``<numba cache>/native/k_<hash>.py`` and
compiled with ``cache=True``, so a second process (another worker, the next
``make run``) loads machine code from disk instead of compiling. Compiled code is
never freed by numba (about 1.4 MB per kernel compiled in the process, 0.14 MB per
kernel loaded from disk), so one process holds at most :data:`MAX_PER_PROCESS`
kernels; past that, models run on the interpreter (a long-running worker keeps
bounded memory). Programs longer than :data:`MAX_ROWS` stay interpreted too:
compile time grows faster than linearly with the function's length, and large
models spend their time in linear algebra, not here.
"""
from __future__ import annotations

import hashlib
import importlib.util
import logging
import math
import os
import sys
import threading
import time
from dataclasses import dataclass, replace
from pathlib import Path

import numpy as np

from engine.kernels import disk_cache, vm

log = logging.getLogger(__name__)

MAX_ROWS = 1500        # per program; beyond this the interpreter runs it
MAX_PER_PROCESS = 64   # kernels compiled (or loaded) by one process: ~1.5 MB each

# One line of Python per instruction, spelled as engine.kernels.vm.run computes it. Fields:
# {d} {a} {b} {e}: registers named by the row's fields; {ca} {cb}: constants indexed by
# fields a and b; {ia} {ib} {id}: fields a, b and dst as plain integers.
_LINES = {
    vm.ADD: "{d} = {a} + {b}", vm.SUB: "{d} = {a} - {b}",
    vm.MUL: "{d} = {a} * {b}", vm.DIV: "{d} = {a} / {b}",
    vm.OUT: "out[{id}] = {a}", vm.OUTC: "out[{id}] = {ca}",
    vm.STATE: "{d} = y[{ia}]", vm.PARAM: "{d} = p[{ia}]", vm.CONST: "{d} = {ca}",
    vm.TIME: "{d} = t",
    vm.MULADD: "{d} = {a} * {b} + {e}",
    vm.MULC: "{d} = {a} * {cb}", vm.MULP: "{d} = {a} * p[{ib}]",
    vm.MULADDC: "{d} = {a} * {cb} + {e}", vm.MULADDP: "{d} = {a} * p[{ib}] + {e}",
    vm.POWI: "{d} = _powi({a}, {ib})", vm.POW: "{d} = _pow({a}, {b})",
    vm.NEG: "{d} = -{a}",
    vm.SQUARE: "{d} = {a} * {a}",
    vm.EXP: "{d} = math.exp(min({a}, 709.0))",
    vm.LOG: "{d} = _log({a})",
    vm.LOG10: "{d} = math.log10({a}) if {a} > 0.0 else (-math.inf if {a} == 0.0 else math.nan)",
    vm.SQRT: "{d} = math.sqrt({a}) if {a} >= 0.0 else math.nan",
    vm.SIN: "{d} = math.sin({a})", vm.COS: "{d} = math.cos({a})", vm.TAN: "{d} = math.tan({a})",
    vm.SINH: "{d} = math.sinh(min(max({a}, -709.0), 709.0))",
    vm.COSH: "{d} = math.cosh(min(max({a}, -709.0), 709.0))",
    vm.TANH: "{d} = math.tanh({a})", vm.ABS: "{d} = abs({a})",
    vm.SIGN: "{d} = 1.0 if {a} > 0.0 else (-1.0 if {a} < 0.0 else 0.0)",
    vm.STEP: "{d} = 1.0 if {a} >= 0.0 else 0.0",
    vm.NOT: "{d} = 1.0 if {a} == 0.0 else 0.0",
    vm.MOVE: "{d} = {a}",
    vm.MIN: "{d} = min({a}, {b})", vm.MAX: "{d} = max({a}, {b})",
    vm.LT: "{d} = 1.0 if {a} < {b} else 0.0", vm.LE: "{d} = 1.0 if {a} <= {b} else 0.0",
    vm.GT: "{d} = 1.0 if {a} > {b} else 0.0", vm.GE: "{d} = 1.0 if {a} >= {b} else 0.0",
    vm.EQ: "{d} = 1.0 if {a} == {b} else 0.0", vm.NE: "{d} = 1.0 if {a} != {b} else 0.0",
    vm.AND: "{d} = 1.0 if ({a} != 0.0 and {b} != 0.0) else 0.0",
    vm.OR: "{d} = 1.0 if ({a} != 0.0 or {b} != 0.0) else 0.0",
    vm.SELECT: "{d} = {b} if {a} != 0.0 else {e}",
}


class Untranslatable(Exception):
    """A program this tier does not translate (the interpreter runs it instead)."""


def _literal(value: float) -> str:
    v = float(value)
    if math.isnan(v):
        return "math.nan"
    if math.isinf(v):
        return "math.inf" if v > 0 else "(-math.inf)"
    return f"({v!r})"


def _program_lines(code: np.ndarray, consts: np.ndarray) -> list[str]:
    """Body lines for one program; registers become locals ``r<i>``."""
    lines: list[str] = []
    c = [_literal(v) for v in consts]

    def r(i):
        return f"r{int(i)}"

    k0 = 0
    if code.shape[0] and code[0, 0] == vm.PROLOGUE:
        ny, npar, nc, ht = (int(v) for v in code[0, 1:5])
        for i in range(ny):
            lines.append(f"r{i} = y[{i}]")
        for i in range(npar):
            lines.append(f"r{ny + i} = p[{i}]")
        o = ny + npar
        if ht:
            lines.append(f"r{o} = t")
            o += 1
        for i in range(nc):
            lines.append(f"r{o + i} = {c[i]}")
        k0 = 1
    for row in code[k0:]:
        op, d, a, b, e = (int(v) for v in row)
        template = _LINES.get(op)
        if template is None:
            raise Untranslatable(f"opcode {op}")
        # constants are looked up only where the template reads them (a field that is a
        # register elsewhere may lie outside the constant table)
        fields = {"d": r(d), "a": r(a), "b": r(b), "e": r(e), "ia": a, "ib": b, "id": d}
        if "{ca}" in template:
            fields["ca"] = c[a]
        if "{cb}" in template:
            fields["cb"] = c[b]
        lines.append(template.format(**fields))
    return lines


def _mass_action_lines(ma: np.ndarray, consts: np.ndarray) -> list[str]:
    """``engine.kernels.vm.mass_action`` unrolled: the same products in the same order."""
    m, v0 = int(ma[0]), int(ma[1])
    kb, lines = 2, []
    rp = kb + 4 * m
    pp = rp + m + 1
    sp = pp + m + 1
    s0 = int(ma[sp])

    def source(kind, i):
        if kind == vm.K_PARAM:
            return f"p[{i}]"
        if kind == vm.K_REG:
            return f"r{i}"
        return _literal(consts[i])

    for j in range(m):
        c = kb + 4 * j
        expr = source(int(ma[c]), int(ma[c + 1]))
        for q in range(int(ma[rp + j]), int(ma[rp + j + 1])):
            expr += f" * y[{int(ma[q])}]"
        lines.append(f"w = {expr}")
        if int(ma[c + 2]) != vm.K_NONE:
            expr = source(int(ma[c + 2]), int(ma[c + 3]))
            for q in range(int(ma[pp + j]), int(ma[pp + j + 1])):
                expr += f" * y[{int(ma[q])}]"
            lines.append(f"w = w - {expr}")
        for q in range(int(ma[sp + j]), int(ma[sp + j + 1])):
            lines.append(f"out[{int(ma[q])}] += {_literal(consts[v0 + q - s0])} * w")
    return lines


_HEADER = '''"""Generated by engine.kernels.native from a compiled model program. Do not edit."""
import math
from numba import carray, cfunc, types
from engine.kernels.vm import _log, _pow, _powi

_P = types.CPointer(types.float64)
SIG = types.void(types.float64, _P, _P, _P)
'''


def _function(name: str, n_y: int, n_p: int, n_out: int, body: list[str]) -> str:
    head = [
        "",
        "",
        '@cfunc(SIG, cache=True, nopython=True, error_model="numpy")',
        f"def {name}(t, y_ptr, p_ptr, out_ptr):",
        f"    y = carray(y_ptr, ({max(n_y, 1)},))",
        f"    p = carray(p_ptr, ({max(n_p, 1)},))",
        f"    out = carray(out_ptr, ({max(n_out, 1)},))",
    ]
    return "\n".join(head + ["    " + line for line in body] + ["    return", ""])


def module_source(kernel: vm.Kernel, n_params: int) -> str:
    """Python source of the generated module (functions ``rhs``, ``jac``, ``events``)."""
    for code in (kernel.rhs_code, kernel.jac_code, kernel.event_code):
        if code.shape[0] > MAX_ROWS:
            raise Untranslatable(f"a program of {code.shape[0]} rows (limit {MAX_ROWS})")
    rhs = []
    if kernel.ma[0] > 0:
        rhs.append(f"for i in range({kernel.n}):")
        rhs.append("    out[i] = 0.0")
    rhs += _program_lines(kernel.rhs_code, kernel.consts)
    if kernel.ma[0] > 0:
        rhs += _mass_action_lines(kernel.ma, kernel.consts)
    jac = _program_lines(kernel.jac_code, kernel.consts)
    nnz = int(kernel.jac_rows.shape[0])
    events = _program_lines(kernel.event_code, kernel.consts)
    return (_HEADER + _function("rhs", kernel.n, n_params, kernel.n, rhs)
            + _function("jac", kernel.n, n_params, nnz, jac)
            + _function("events", kernel.n, n_params, kernel.n_events, events))


@dataclass(frozen=True)
class NativeBuild:
    """What one attempt to build a kernel's machine code gave."""

    kernel: vm.Kernel   # the kernel with its native addresses set (or unchanged)
    used: bool          # whether the machine code is in use
    seconds: float      # translation and compile (or cache load) time
    reason: str         # why not, when not used ("" when used)


_lock = threading.Lock()          # the dictionaries below; held for microseconds
_compile_lock = threading.Lock()  # one compile at a time in this process
_modules: dict[str, object] = {}  # digest -> module (keeps the machine code alive)


def _cache_folder() -> Path:
    base = os.environ.get("NUMBA_CACHE_DIR") or str(Path.cwd() / "var" / "numba-cache")
    return Path(base) / "native"


def _load(digest: str, source: str):
    folder = _cache_folder()
    folder.mkdir(parents=True, exist_ok=True)
    path = folder / f"k_{digest}.py"
    written = False
    if not path.exists() or path.read_text() != source:
        tmp = folder / f".k_{digest}.{os.getpid()}.tmp"
        tmp.write_text(source)
        os.replace(tmp, path)  # atomic: a concurrent worker sees the old or the new file
        written = True
    else:
        disk_cache.touch(path)
    name = f"stifflane_native_k_{digest}"
    spec = importlib.util.spec_from_file_location(name, path)
    module = importlib.util.module_from_spec(spec)
    sys.modules[name] = module
    spec.loader.exec_module(module)
    if written:  # a new model on disk: keep the folder within its budget
        with _lock:
            held = frozenset(_modules) | {digest}
        disk_cache.prune(folder, keep=held)
    return module


def build(kernel: vm.Kernel, n_params: int, compile_new: bool = True) -> NativeBuild:
    """The kernel with machine-code right-hand side, Jacobian and event functions, when
    this tier can build them; otherwise the kernel unchanged and the reason.

    ``compile_new=False`` only loads machine code this process holds or an earlier
    process left on disk (milliseconds), and never compiles (0.1-0.5 s per model).
    """
    started = time.perf_counter()
    if kernel.native_rhs != 0:
        return NativeBuild(kernel, True, 0.0, "")
    try:
        source = module_source(kernel, n_params)
    except Untranslatable as exc:
        return NativeBuild(kernel, False, time.perf_counter() - started, str(exc))
    digest = hashlib.sha256(source.encode()).hexdigest()[:24]
    with _lock:
        module = _modules.get(digest)
    if module is None:
        if not compile_new and not (_cache_folder() / f"k_{digest}.py").exists():
            return NativeBuild(kernel, False, time.perf_counter() - started,
                               "not compiled: a compile would cost more than it saves "
                               f"here (about {compile_estimate(kernel):.1f} s)")
        with _compile_lock:
            with _lock:
                module = _modules.get(digest)  # compiled by another thread meanwhile
                full = len(_modules) >= MAX_PER_PROCESS
            if module is None:
                if full:
                    return NativeBuild(kernel, False, time.perf_counter() - started,
                                       f"this process already holds {MAX_PER_PROCESS} compiled models")
                try:
                    module = _load(digest, source)
                except Exception as exc:  # noqa: BLE001 - a failed compile leaves the interpreter
                    log.warning("machine code for kernel %s not built: %s: %s", digest,
                                type(exc).__name__, exc)
                    return NativeBuild(kernel, False, time.perf_counter() - started,
                                       f"compile failed ({type(exc).__name__}); the interpreter ran")
                with _lock:
                    _modules[digest] = module
    native = kernel._replace(native_rhs=int(module.rhs.address), native_jac=int(module.jac.address),
                             native_events=int(module.events.address) if kernel.n_events else 0)
    return NativeBuild(native, True, time.perf_counter() - started, "")


def loaded() -> int:
    """Number of kernels whose machine code this process holds."""
    return len(_modules)


# Job option values (schemas.job.MACHINE_CODE)
from engine.choices import (MACHINE_CODE_ALWAYS as ALWAYS, MACHINE_CODE_AUTO as AUTO,  # noqa: E402
                            MACHINE_CODE_MODES as MODES, MACHINE_CODE_NEVER as NEVER)

_uses: dict[str, int] = {}  # model content hash -> solves asked for in this process
_kernels: dict[str, vm.Kernel] = {}  # model content hash -> its kernel with machine code

# Compile time measured here (numba 0.68, 2-core Xeon): about 0.1 s plus 1.5 ms per
# program row (HIRES' 70 rows: 0.4 s; 1,050 rows: 1.8 s; 2,250 rows: 3.2 s).
BATCH_MIN_MEMBERS = 64       # auto compiles for batches at least this large
REPEAT_MAX_SECONDS = 1.0     # ... and for a model asked for again, if this quick to compile


def compile_estimate(kernel: vm.Kernel) -> float:
    """Rough seconds numba takes to compile the kernel's machine code."""
    rows = kernel.rhs_code.shape[0] + kernel.jac_code.shape[0] + kernel.event_code.shape[0]
    return 0.1 + 0.0015 * rows


def choose(prepared, mode: str = AUTO, solves: int = 1):
    """``(prepared, info)``: the model with machine code when ``mode`` asks for it, and
    the report entry saying what was used.

    ``auto`` loads machine code that any process on this host compiled before
    (milliseconds); it compiles new machine code for a batch of at least
    :data:`BATCH_MIN_MEMBERS` members (``solves``), and for a model this process was
    asked for before when the compile is quick (:data:`REPEAT_MAX_SECONDS`); so a
    one-off job does not wait for a compile its own solve would not repay (a long one
    moves to machine code mid-run instead: ``engine.integrate._tier_up``). ``always``
    compiles whenever the tier can; ``never`` keeps the interpreter.
    """
    if mode == NEVER:
        return prepared, {"used": False, "seconds": 0.0, "reason": "the job asked for the interpreter"}
    key = prepared.content_hash
    with _lock:
        known = _kernels.get(key)  # built before: skip writing and hashing the source again
        seen = _uses.get(key, 0)
        if key:
            _uses[key] = seen + 1
            while len(_uses) > 4 * MAX_PER_PROCESS:
                _uses.pop(next(iter(_uses)))
    if known is not None:
        return replace(prepared, kernel=known), {"used": True, "seconds": 0.0, "reason": ""}
    compile_now = mode == ALWAYS or solves >= BATCH_MIN_MEMBERS
    result = build(prepared.kernel, len(prepared.param_names), compile_new=compile_now)
    info = {"used": result.used, "seconds": round(result.seconds, 6), "reason": result.reason}
    if not result.used:
        if (not compile_now and key and seen > 0
                and compile_estimate(prepared.kernel) <= REPEAT_MAX_SECONDS
                and _compile_in_background(key, prepared.kernel, len(prepared.param_names))):
            info["reason"] = ("asked for again: machine code is compiling in the background for "
                              "the next run of this model; this run used the interpreter")
        return prepared, info
    _remember(key, result.kernel)
    return replace(prepared, kernel=result.kernel), info


_pending: set[str] = set()  # content hashes compiling in a background thread


def _remember(key: str, kernel: vm.Kernel) -> None:
    if key:
        with _lock:
            _kernels[key] = kernel
            while len(_kernels) > 4 * MAX_PER_PROCESS:
                _kernels.pop(next(iter(_kernels)))


def _compile_in_background(key: str, kernel: vm.Kernel, n_params: int) -> bool:
    """Start compiling a model's machine code in a daemon thread (once per model); the
    run that asked goes on with the interpreter, later runs find the machine code."""
    with _lock:
        if key in _pending or len(_pending) >= 2:
            return key in _pending
        _pending.add(key)

    def work():
        try:
            result = build(kernel, n_params, compile_new=True)
            if result.used:
                _remember(key, result.kernel)
        finally:
            with _lock:
                _pending.discard(key)

    threading.Thread(target=work, name=f"machine-code-{key[:12]}", daemon=True).start()
    return True


def wait_for_background(timeout: float = 60.0) -> bool:
    """Until no background compile runs (tests, orderly shutdown); True when none is left."""
    deadline = time.monotonic() + timeout
    while time.monotonic() < deadline:
        with _lock:
            if not _pending:
                return True
        time.sleep(0.01)
    return False
