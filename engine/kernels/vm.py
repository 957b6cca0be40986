"""Register machine that evaluates model programs inside compiled loops.

A model's right-hand side, Jacobian values, intermediate quantities and event
functions are each compiled (by ``engine.kernels.program``) into a *program*: a plain
``int32`` array of instructions over a ``float64`` register file. One numba
function, compiled once and cached on disk, runs every program of every model,
so any model runs at once, without a compile (compiled code is never freed, so a
long-running worker cannot compile every model it sees). ``engine.kernels.native`` adds,
for models evaluated many times and within its bounds, machine code that the
compiled loops call through the Kernel's ``native_*`` addresses instead.

Instruction layout: ``code[k] = (op, dst, a, b, c)``.

- ``dst`` is a register index, except for ``OUT`` where it is the index in the
  output array.
- ``a``, ``b``, ``c`` are register indices, except for the load ops where ``a``
  is an index into ``consts``, ``y`` or ``p``, and for ``POWI`` where ``b`` is
  the (signed) integer exponent.

The engine's integrators call :func:`run` through :class:`Kernel`, a named tuple
of arrays, never through Python objects.
"""
from __future__ import annotations

import math
from typing import NamedTuple

import numpy as np
from llvmlite import ir
from numba import njit, types
from numba.extending import intrinsic

# Opcodes. Numbers are part of the program format (programs are cached by
# content hash), so append new ones; never renumber.
CONST, STATE, PARAM, TIME, OUT = 0, 1, 2, 3, 4
ADD, SUB, MUL, DIV, NEG = 5, 6, 7, 8, 9
POW, POWI, SQUARE = 10, 11, 12
EXP, LOG, LOG10, SQRT = 13, 14, 15, 16
SIN, COS, TAN, SINH, COSH, TANH, ABS = 17, 18, 19, 20, 21, 22, 23
MIN, MAX, STEP = 24, 25, 26
LT, LE, GT, GE, EQ, NE = 27, 28, 29, 30, 31, 32
AND, OR, NOT, SELECT = 33, 34, 35, 36
MULADD = 37  # dst = a * b + c (fused form used by mass-action rates)
SIGN = 38
MOVE = 39    # dst = a (pins a value in a register read after the program)
# Load-free operand forms (engine.kernels.program folds a single-use constant or parameter
# load into its reader): one dispatch instead of two.
MULC, MULP = 40, 41          # dst = a * consts[b] / a * p[b]
MULADDC, MULADDP = 42, 43    # dst = a * consts[b] + c / a * p[b] + c
OUTC = 44                    # out[dst] = consts[a]
# First row of a linked program (engine.kernels.program.link): (PROLOGUE, ny, np, nc, t) copies
# y[:ny], p[:np], t (if t != 0) and consts[:nc] into registers 0, 1, ... in that order.
PROLOGUE = 45

N_FIELDS = 5

OPCODE_NAMES = {
    value: name
    for name, value in dict(globals()).items()
    if name.isupper() and isinstance(value, int) and name not in ("N_FIELDS",)
}


# Sources of a mass-action rate constant (Kernel.ma_k columns 0/2).
K_NONE, K_REG, K_PARAM, K_CONST = 0, 1, 2, 3


class Kernel(NamedTuple):
    """Everything an integrator needs to evaluate one prepared model.

    All fields are numpy arrays or ints so numba compiles one specialisation
    for every model. ``jac_rows``/``jac_cols`` give the (row, column) of each
    Jacobian value written by ``jac_code`` (COO pattern, row-major sorted).
    """

    n: int                 # number of states
    n_regs: int            # register file size shared by all programs
    consts: np.ndarray     # float64 constants
    rhs_code: np.ndarray   # int32 (k, 5): writes out[0:n]
    jac_code: np.ndarray   # int32 (k, 5): writes vals[0:nnz]
    jac_rows: np.ndarray   # int64 (nnz,)
    jac_cols: np.ndarray   # int64 (nnz,)
    aux_code: np.ndarray   # int32 (k, 5): writes intermediate quantities
    n_aux: int
    event_code: np.ndarray  # int32 (k, 5): writes event function values
    n_events: int
    # Structural mass-action part of the right-hand side, packed into one int64 array
    # (see mass_action); [0, 0] when the model has no reactions.
    ma: np.ndarray = np.zeros(2, dtype=np.int64)
    # Addresses of machine-code versions of the right-hand side (mass-action part
    # included), the Jacobian values and the event functions (engine.kernels.native); 0: the
    # programs run here. Derived quantities (read at output times only) stay here.
    # The addresses are valid in this process and its forked children only: a Kernel is
    # never sent to another process (jobs cross the queue as JSON and are prepared there).
    native_rhs: int = 0
    native_jac: int = 0
    native_events: int = 0


# error_model="numpy": x/0 gives inf/nan like numpy instead of raising ZeroDivisionError.
@njit(cache=True, nogil=True, _nrt=False, error_model="numpy")
def run(code, consts, t, y, p, regs, out):
    """Execute one program: read ``t``, ``y``, ``p``; write ``out``."""
    k0 = 0
    if code.shape[0] > 0 and code[0, 0] == PROLOGUE:
        ny, npar, nc = code[0, 1], code[0, 2], code[0, 3]
        for i in range(ny):
            regs[i] = y[i]
        for i in range(npar):
            regs[ny + i] = p[i]
        o = ny + npar
        if code[0, 4] != 0:
            regs[o] = t
            o += 1
        for i in range(nc):
            regs[o + i] = consts[i]
        k0 = 1
    for k in range(k0, code.shape[0]):
        op = code[k, 0]
        d = code[k, 1]
        a = code[k, 2]
        if op == MUL:
            regs[d] = regs[a] * regs[code[k, 3]]
        elif op == STATE:
            regs[d] = y[a]
        elif op == PARAM:
            regs[d] = p[a]
        elif op == CONST:
            regs[d] = consts[a]
        elif op == ADD:
            regs[d] = regs[a] + regs[code[k, 3]]
        elif op == SUB:
            regs[d] = regs[a] - regs[code[k, 3]]
        elif op == OUT:
            out[d] = regs[a]
        elif op == MULADD:
            regs[d] = regs[a] * regs[code[k, 3]] + regs[code[k, 4]]
        elif op == MULC:
            regs[d] = regs[a] * consts[code[k, 3]]
        elif op == MULADDC:
            regs[d] = regs[a] * consts[code[k, 3]] + regs[code[k, 4]]
        elif op == MULP:
            regs[d] = regs[a] * p[code[k, 3]]
        elif op == MULADDP:
            regs[d] = regs[a] * p[code[k, 3]] + regs[code[k, 4]]
        elif op == OUTC:
            out[d] = consts[a]
        elif op == NEG:
            regs[d] = -regs[a]
        elif op == DIV:
            regs[d] = regs[a] / regs[code[k, 3]]
        elif op == SQUARE:
            x = regs[a]
            regs[d] = x * x
        elif op == POWI:
            regs[d] = _powi(regs[a], code[k, 3])
        elif op == POW:
            regs[d] = _pow(regs[a], regs[code[k, 3]])
        elif op == EXP:
            regs[d] = math.exp(min(regs[a], 709.0))
        elif op == TIME:
            regs[d] = t
        elif op == LOG:
            regs[d] = _log(regs[a])
        elif op == LOG10:
            x = regs[a]
            regs[d] = math.log10(x) if x > 0.0 else (-math.inf if x == 0.0 else math.nan)
        elif op == SQRT:
            x = regs[a]
            regs[d] = math.sqrt(x) if x >= 0.0 else math.nan
        elif op == SIN:
            regs[d] = math.sin(regs[a])
        elif op == COS:
            regs[d] = math.cos(regs[a])
        elif op == TAN:
            regs[d] = math.tan(regs[a])
        elif op == SINH:
            regs[d] = math.sinh(min(max(regs[a], -709.0), 709.0))
        elif op == COSH:
            regs[d] = math.cosh(min(max(regs[a], -709.0), 709.0))
        elif op == TANH:
            regs[d] = math.tanh(regs[a])
        elif op == ABS:
            regs[d] = abs(regs[a])
        elif op == SIGN:
            x = regs[a]
            regs[d] = 1.0 if x > 0.0 else (-1.0 if x < 0.0 else 0.0)
        elif op == MIN:
            regs[d] = min(regs[a], regs[code[k, 3]])
        elif op == MAX:
            regs[d] = max(regs[a], regs[code[k, 3]])
        elif op == STEP:
            regs[d] = 1.0 if regs[a] >= 0.0 else 0.0
        elif op == LT:
            regs[d] = 1.0 if regs[a] < regs[code[k, 3]] else 0.0
        elif op == LE:
            regs[d] = 1.0 if regs[a] <= regs[code[k, 3]] else 0.0
        elif op == GT:
            regs[d] = 1.0 if regs[a] > regs[code[k, 3]] else 0.0
        elif op == GE:
            regs[d] = 1.0 if regs[a] >= regs[code[k, 3]] else 0.0
        elif op == EQ:
            regs[d] = 1.0 if regs[a] == regs[code[k, 3]] else 0.0
        elif op == NE:
            regs[d] = 1.0 if regs[a] != regs[code[k, 3]] else 0.0
        elif op == AND:
            regs[d] = 1.0 if (regs[a] != 0.0 and regs[code[k, 3]] != 0.0) else 0.0
        elif op == OR:
            regs[d] = 1.0 if (regs[a] != 0.0 or regs[code[k, 3]] != 0.0) else 0.0
        elif op == NOT:
            regs[d] = 1.0 if regs[a] == 0.0 else 0.0
        elif op == SELECT:
            regs[d] = regs[code[k, 3]] if regs[a] != 0.0 else regs[code[k, 4]]
        elif op == MOVE:
            regs[d] = regs[a]


@njit(cache=True, nogil=True, _nrt=False, inline="always")
def mass_action(ma, consts, y, p, regs, out):
    """Add the mass-action terms S r to ``out`` (rate constants already in place).

    ``ma`` layout (m reactions): ``[m, v0, K (4m), rp (m+1), pp (m+1), sp (m+1), ...]``.
    ``K[j] = (kind_f, index_f, kind_r, index_r)``; reaction j's rate is
    ``K_f * prod y[ma[rp[j]:rp[j+1]]] - K_r * prod y[ma[pp[j]:pp[j+1]]]`` (species
    repeated by order) and it adds ``consts[v0 + q - sp[0]] * rate`` to ``out[ma[q]]``
    for q in ``sp[j]:sp[j+1]``. One array keeps the kernel tuple small (each array
    passed between compiled functions costs reference counting).
    """
    m = ma[0]
    v0 = ma[1]
    kb = 2
    rp = kb + 4 * m
    pp = rp + m + 1
    sp = pp + m + 1
    s0 = ma[sp]
    for j in range(m):
        c = kb + 4 * j
        # rate constants read in line: a helper function taking the arrays would cost
        # reference counting on every call inside this loop
        kind, i = ma[c], ma[c + 1]
        r = p[i] if kind == K_PARAM else (regs[i] if kind == K_REG else consts[i])
        for q in range(ma[rp + j], ma[rp + j + 1]):
            r *= y[ma[q]]
        kind, i = ma[c + 2], ma[c + 3]
        if kind != K_NONE:
            rr = p[i] if kind == K_PARAM else (regs[i] if kind == K_REG else consts[i])
            for q in range(ma[pp + j], ma[pp + j + 1]):
                rr *= y[ma[q]]
            r -= rr
        for q in range(ma[sp + j], ma[sp + j + 1]):
            out[ma[q]] += consts[v0 + q - s0] * r


@njit(cache=True, nogil=True, _nrt=False, inline="always")
def _log(x):
    if x > 0.0:
        return math.log(x)
    if x == 0.0:
        return -math.inf
    return math.nan


@njit(cache=True, nogil=True, _nrt=False, inline="always", error_model="numpy")
def _powi(x, n):
    if n < 0:
        x = 1.0 / x
        n = -n
    r = 1.0
    while n:
        if n & 1:
            r *= x
        x *= x
        n >>= 1
    return r


@njit(cache=True, nogil=True, _nrt=False, inline="always", error_model="numpy")
def _pow(x, e):
    if x < 0.0 and e != math.floor(e):
        return math.nan
    if x == 0.0 and e < 0.0:
        return math.inf
    return x ** e


@intrinsic
def call_native(typingctx, address, t, y, p, out):
    """Call ``void f(double t, double *y, double *p, double *out)`` at ``address``
    (an engine.kernels.native cfunc) with the arrays' data pointers."""
    arrays = (y, p, out)
    if not (isinstance(address, types.Integer) and isinstance(t, types.Float)
            and all(isinstance(a, types.Array) and a.ndim == 1 and a.layout == "C"
                    and a.dtype == types.float64 for a in arrays)):
        return None
    sig = types.void(address, t, y, p, out)

    def codegen(context, builder, signature, args):
        dbl = ir.DoubleType()
        fnty = ir.FunctionType(ir.VoidType(), [dbl, dbl.as_pointer(), dbl.as_pointer(),
                                               dbl.as_pointer()])
        fn = builder.inttoptr(args[0], fnty.as_pointer())
        tv = context.cast(builder, args[1], signature.args[1], types.float64)
        ptrs = [context.make_array(ty)(context, builder, v).data
                for ty, v in zip(signature.args[2:], args[2:])]
        builder.call(fn, [tv, *ptrs])
        return context.get_dummy_value()

    return sig, codegen


@njit(cache=True, nogil=True, _nrt=False)
def rhs(kernel, t, y, p, regs, out):
    """dy/dt into ``out`` (length n): the program's terms, then the mass-action terms."""
    if kernel.native_rhs != 0:
        call_native(kernel.native_rhs, t, y, p, out)
    elif kernel.ma[0] == 0:  # no reactions: one call level less (the program alone)
        run(kernel.rhs_code, kernel.consts, t, y, p, regs, out)
    else:
        rhs_parts(kernel.rhs_code, kernel.consts, kernel.ma, t, y, p, regs, out)


@njit(cache=True, nogil=True, _nrt=False)
def rhs_parts(rhs_code, consts, ma, t, y, p, regs, out):
    """:func:`rhs` from the three arrays it reads. Hot loops that take these out of the
    kernel once can call this instead: passing the whole Kernel tuple into a compiled
    function costs a reference-count update per array field on every call."""
    if ma[0] > 0:
        for i in range(out.shape[0]):  # the program then writes only the states with
            out[i] = 0.0               # their own ddt terms
    if rhs_code.shape[0] > 0:
        run(rhs_code, consts, t, y, p, regs, out)
    if ma[0] > 0:
        mass_action(ma, consts, y, p, regs, out)


@njit(cache=True, nogil=True, _nrt=False)
def jac_values(kernel, t, y, p, regs, vals):
    """Nonzero Jacobian values into ``vals`` in the kernel's COO order."""
    if kernel.native_jac != 0:
        call_native(kernel.native_jac, t, y, p, vals)
    else:
        run(kernel.jac_code, kernel.consts, t, y, p, regs, vals)


@njit(cache=True, nogil=True, _nrt=False)
def jac_dense(kernel, t, y, p, regs, vals, J):
    """Dense Jacobian into ``J`` (n x n), via the sparse values."""
    jac_values(kernel, t, y, p, regs, vals)
    J[:, :] = 0.0
    for k in range(vals.shape[0]):
        J[kernel.jac_rows[k], kernel.jac_cols[k]] = vals[k]


@njit(cache=True, nogil=True, _nrt=False)
def aux(kernel, t, y, p, regs, out):
    """Intermediate quantities into ``out`` (length n_aux)."""
    run(kernel.aux_code, kernel.consts, t, y, p, regs, out)


@njit(cache=True, nogil=True, _nrt=False)
def events(kernel, t, y, p, regs, out):
    """Event function values into ``out`` (length n_events)."""
    if kernel.native_events != 0:
        call_native(kernel.native_events, t, y, p, out)
    else:
        run(kernel.event_code, kernel.consts, t, y, p, regs, out)


def prologue_registers(code: np.ndarray) -> int:
    """Registers a linked program's prologue fills (0 for a program without one)."""
    if code.shape[0] and code[0, 0] == PROLOGUE:
        return int(code[0, 1] + code[0, 2] + code[0, 3] + (code[0, 4] != 0))
    return 0


def reads_time(code: np.ndarray) -> bool:
    """Whether a program reads t (a TIME load, or the prologue's t slot)."""
    if code.shape[0] and code[0, 0] == PROLOGUE and code[0, 4]:
        return True
    return bool((code[:, 0] == TIME).any())


def empty_code() -> np.ndarray:
    return np.zeros((0, N_FIELDS), dtype=np.int32)


def disassemble(code: np.ndarray) -> list[str]:
    """Readable listing of a program, for debugging and DEVELOPERS.md examples."""
    return [
        f"{OPCODE_NAMES.get(int(row[0]), '?'):7s} r{row[1]} <- {row[2]} {row[3]} {row[4]}"
        for row in code
    ]
