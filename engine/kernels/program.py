"""Compile expression DAGs into register programs for :func:`engine.kernels.vm.run`.

Each program evaluates a list of ``(output index, node)`` pairs. Nodes are
visited children-first, each shared node is computed once (the builder has
already hash-consed equal subexpressions), single-use products feeding a sum
become one fused ``MULADD``, every output is written as soon as its value is
ready, and a register is reused as soon as its value's last reader has run, so
``n_regs`` stays small (linear-scan allocation over a straight-line program).
"""
from __future__ import annotations

import numpy as np

from engine.kernels import vm
from engine.language.expr import Node, postorder

_OPCODES = {
    "add": vm.ADD, "sub": vm.SUB, "mul": vm.MUL, "div": vm.DIV, "neg": vm.NEG,
    "pow": vm.POW, "exp": vm.EXP, "log": vm.LOG, "log10": vm.LOG10, "sqrt": vm.SQRT,
    "sin": vm.SIN, "cos": vm.COS, "tan": vm.TAN, "sinh": vm.SINH, "cosh": vm.COSH,
    "tanh": vm.TANH, "abs": vm.ABS, "sign": vm.SIGN, "min": vm.MIN, "max": vm.MAX,
    "step": vm.STEP, "lt": vm.LT, "le": vm.LE, "gt": vm.GT, "ge": vm.GE, "eq": vm.EQ,
    "ne": vm.NE, "and": vm.AND, "or": vm.OR, "not": vm.NOT, "select": vm.SELECT,
}


class ConstPool:
    """Deduplicated float64 constants shared by all programs of one kernel."""

    def __init__(self):
        self.index: dict[float, int] = {}

    def __call__(self, value: float) -> int:
        return self.index.setdefault(value, len(self.index))

    def array(self) -> np.ndarray:
        out = np.zeros(len(self.index))
        for v, i in self.index.items():
            out[i] = v
        return out


def _uses(nodes: list[Node], outputs, pinned=()) -> dict[int, int]:
    uses: dict[int, int] = {}
    for n in nodes:
        for c in n.args:
            uses[id(c)] = uses.get(id(c), 0) + 1
    for _, n in (*outputs, *pinned):
        uses[id(n)] = uses.get(id(n), 0) + 1
    return uses


def _schedule(outputs, pinned=()) -> list[tuple[int, int, Node, tuple]]:
    """Instructions as (opcode, extra, result node, operand nodes); OUT and MOVE
    (pinned values) have result None."""
    nodes = postorder([n for _, n in (*outputs, *pinned)])
    uses = _uses(nodes, outputs, pinned)
    by_node: dict[int, list[tuple[int, int]]] = {}
    for k, n in outputs:
        by_node.setdefault(id(n), []).append((vm.OUT, k))
    for k, n in pinned:
        by_node.setdefault(id(n), []).append((vm.MOVE, k))
    fused: set[int] = set()
    for n in nodes:  # a product read only by one sum is folded into that sum
        if n.op == "add":
            for m in n.args:
                if m.op == "mul" and uses[id(m)] == 1 and id(m) not in by_node:
                    fused.add(id(m))
                    break
    sched = []
    for n in nodes:
        if id(n) in fused:
            continue
        op = n.op
        if op == "const":
            sched.append((vm.CONST, n.value, n, ()))
        elif op in ("y", "p"):
            sched.append((vm.STATE if op == "y" else vm.PARAM, n.value, n, ()))
        elif op == "t":
            sched.append((vm.TIME, 0, n, ()))
        elif op == "powi":
            if n.value == 2:
                sched.append((vm.SQUARE, 0, n, n.args))
            else:
                sched.append((vm.POWI, n.value, n, n.args))
        elif op == "add" and any(id(m) in fused for m in n.args):
            m, other = (n.args[0], n.args[1]) if id(n.args[0]) in fused else (n.args[1], n.args[0])
            sched.append((vm.MULADD, 0, n, (m.args[0], m.args[1], other)))
        else:
            sched.append((_OPCODES[op], 0, n, n.args))
        for opc, k in by_node.get(id(n), ()):
            sched.append((opc, k, None, (n,)))
    return sched


def compile_program(outputs: list[tuple[int, Node]], pool: ConstPool,
                    pinned: list[tuple[int, Node]] = ()) -> tuple[np.ndarray, int]:
    """Register program computing each ``out[k] = node``; returns (code, registers used).

    Each ``(slot, node)`` in ``pinned`` leaves its value in register ``base + slot`` at
    the end, where ``base`` is the number of working registers; the registers used
    then include the pinned ones (``base + len(pinned)``).
    """
    sched = _schedule(outputs, pinned)
    last: dict[int, int] = {}
    for i, (_, _, _, operands) in enumerate(sched):
        for m in operands:
            last[id(m)] = i
    rows: list[tuple] = []
    reg: dict[int, int] = {}
    free: list[int] = []
    n_regs = 0
    for i, (opc, extra, node, operands) in enumerate(sched):
        srcs = [reg[id(m)] for m in operands]
        for m in {id(m): m for m in operands}.values():
            if last[id(m)] == i:
                free.append(reg.pop(id(m)))
        if opc in (vm.OUT, vm.MOVE):
            rows.append((opc, extra, srcs[0], 0, 0))
            continue
        if id(node) not in last:  # computed but never read (cannot happen for outputs)
            continue
        if free:
            d = free.pop()
        else:
            d, n_regs = n_regs, n_regs + 1
        reg[id(node)] = d
        if opc == vm.CONST:
            row = (opc, d, pool(extra), 0, 0)
        elif opc in (vm.STATE, vm.PARAM, vm.TIME):
            row = (opc, d, extra, 0, 0)
        elif opc == vm.POWI:
            row = (opc, d, srcs[0], extra, 0)
        else:
            row = (opc, d, *srcs, *([0] * (3 - len(srcs))))
        rows.append(row)
    rows = fold_loads(rows)
    if len(pinned):  # pinned values live after the working registers
        rows = [(r[0], r[1] + n_regs, *r[2:]) if r[0] == vm.MOVE else r for r in rows]
        n_work = n_regs + len(pinned)
    else:
        n_work = max(n_regs, 1)
    rows, base = link(rows, len(pool.index))
    code = np.array(rows, dtype=np.int32).reshape(len(rows), vm.N_FIELDS)
    return code, base + n_work


def link(rows: list[tuple], n_consts: int) -> tuple[list[tuple], int]:
    """Replace the load instructions by a prologue; returns (rows, registers it fills).

    The prologue row ``(PROLOGUE, ny, np, nc, t)`` makes :func:`engine.kernels.vm.run` copy
    ``y[:ny]``, ``p[:np]``, ``t`` (if set) and ``consts[:nc]`` into the first registers
    in one pass of plain copies; instructions read those registers directly, and the
    working registers follow them. A state or parameter read by many instructions
    then costs one copy instead of an interpreted load (measured: HIRES' right-hand
    side 106 -> 76 ns per call). Values are unchanged: the same operations in the same
    order, on the same numbers.
    """
    where_loaded = {vm.STATE, vm.PARAM, vm.CONST, vm.TIME}
    ny = 1 + max((r[2] for r in rows if r[0] == vm.STATE), default=-1)
    npar = 1 + max((r[2] for r in rows if r[0] == vm.PARAM), default=-1)
    ht = int(any(r[0] == vm.TIME for r in rows))
    nc = n_consts if any(r[0] == vm.CONST for r in rows) else 0
    base = ny + npar + ht + nc
    if base == 0:
        return rows, 0
    offset = {vm.STATE: 0, vm.PARAM: ny, vm.TIME: ny + npar, vm.CONST: ny + npar + ht}
    holds: dict[int, int] = {}  # working register -> prologue register it stands for
    out = [(vm.PROLOGUE, ny, npar, nc, ht)]
    for row in rows:
        op = row[0]
        if op in where_loaded:
            holds[row[1]] = offset[op] + (0 if op == vm.TIME else row[2])
            continue
        new = list(row)
        for f in _read_fields(op):
            new[f] = holds.get(row[f], base + row[f])
        if op not in (vm.OUT, vm.OUTC):  # writes a register: it holds a new value now
            holds.pop(row[1], None)
            new[1] = base + row[1]
        out.append(tuple(new))
    return out, base


_NO_READS = {vm.CONST, vm.STATE, vm.PARAM, vm.TIME, vm.OUTC}
_ONE_READ = {vm.OUT, vm.MOVE, vm.MULC, vm.MULP, vm.POWI, vm.NEG, vm.SQUARE, vm.EXP, vm.LOG, vm.LOG10,
             vm.SQRT, vm.SIN, vm.COS, vm.TAN, vm.SINH, vm.COSH, vm.TANH, vm.ABS, vm.SIGN,
             vm.STEP, vm.NOT}
_THREE_READS = {vm.MULADD, vm.SELECT}
# (load op, reader op) -> folded op
_FOLDS = {(vm.CONST, vm.MUL): vm.MULC, (vm.PARAM, vm.MUL): vm.MULP,
          (vm.CONST, vm.MULADD): vm.MULADDC, (vm.PARAM, vm.MULADD): vm.MULADDP,
          (vm.CONST, vm.OUT): vm.OUTC}


def _read_fields(op: int) -> tuple[int, ...]:
    """Fields of an instruction that name registers it reads."""
    if op in _NO_READS:
        return ()
    if op in _ONE_READ:
        return (2,)
    if op in (vm.MULADDC, vm.MULADDP):
        return (2, 4)
    if op in _THREE_READS:
        return (2, 3, 4)
    return (2, 3)


def _single_reader(rows: list[tuple], i: int) -> tuple[int, int]:
    """(row, field) of the only read of the register row i writes, else (-1, -1)."""
    r = rows[i][1]
    found = (-1, -1)
    for j in range(i + 1, len(rows)):
        row = rows[j]
        for f in _read_fields(row[0]):
            if row[f] == r:
                if found[0] >= 0:
                    return -1, -1
                found = (j, f)
        if row[0] not in (vm.OUT, vm.MOVE, vm.OUTC) and row[1] == r:
            break  # redefined: later reads see another value
    return found


def fold_loads(rows: list[tuple]) -> list[tuple]:
    """Fold each constant or parameter load read exactly once, by a product, a fused
    multiply-add (as a factor) or an output, into its reader (the MULC/MULP/MULADDC/
    MULADDP/OUTC forms). Values are unchanged: the same operations in the same order
    (a product's operands swap, which is exact in floating point)."""
    rows = list(rows)
    dropped = set()
    for i, row in enumerate(rows):
        if row[0] not in (vm.CONST, vm.PARAM):
            continue
        j, f = _single_reader(rows, i)
        if j < 0:
            continue
        reader = rows[j]
        new = _FOLDS.get((row[0], reader[0]))
        if new is None or (reader[0] == vm.MULADD and f == 4):
            continue
        if new == vm.OUTC:
            rows[j] = (new, reader[1], row[2], 0, 0)
        else:
            other = reader[3] if f == 2 else reader[2]
            rows[j] = (new, reader[1], other, row[2], reader[4])
        dropped.add(i)
    return [row for k, row in enumerate(rows) if k not in dropped]
