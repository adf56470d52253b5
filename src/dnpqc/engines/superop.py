"""A batched density-matrix simulator for noisy programs: sweep rows side by side.

Every instruction of a circuit (gate, reset, noise channel) is a superoperator S acting on the
row-major vectorised density matrix, vec(ρ)[i·d + j] = ρ[i, j], so that vec(K ρ K†) =
(K ⊗ K*) vec(ρ) (Nielsen & Chuang §8.2). Single-qubit superoperators are composed into the
next two-qubit one on their qubit, and consecutive two-qubit ones on the same pair are multiplied
together, so each fused block is one 16×16 (or 4×4) matrix. The rows of a sweep batch (points ×
imperfection nodes) run side by side: the state is stored as (4^q, rows) real and imaginary
parts. A block that does not depend on the swept parameters is stored once and applied to all
element groups of all rows as one real BLAS gemm; a block that does is a loop vectorised over the
rows. The rows are split over the process's threads (`process_threads`), each with a one-thread
BLAS.

The noise is that of a qiskit-aer `NoiseModel` without readout errors: for each (gate, qubits)
an error channel applied after the gate (`noise.instruction_errors`). Supported instructions:
gates with a matrix, `reset`, noise-channel instructions, `barrier`, `delay` (no-op; idle noise
is explicit), `save_probabilities` (`supports`); `fuse` refuses anything else (`Unsupported`).
"""

from __future__ import annotations

from collections.abc import Mapping, Sequence
from concurrent.futures import ThreadPoolExecutor
from dataclasses import dataclass
from itertools import pairwise

import numpy as np
from numba import njit
from qiskit import QuantumCircuit
from qiskit.circuit import Gate, ParameterExpression
from qiskit.quantum_info import SuperOp
from qiskit_aer.noise import QuantumError
from threadpoolctl import threadpool_limits

from ..resources import process_threads

ErrorTable = Mapping[tuple[str, tuple[int, ...]], QuantumError]

SKIPPED = frozenset({"barrier", "delay"})
CHANNELS = frozenset({"reset", "quantum_channel"})

#: Largest circuit run here: the batch state is 16·4^q bytes per row, and from about 10 qubits
#: Aer's multithreaded update of one large density matrix is the better use of the cores.
MAX_QUBITS = 9


class Unsupported(ValueError):
    """A circuit this simulator cannot run (the caller falls back to qiskit-aer)."""


def supports(circuits: Sequence[QuantumCircuit]) -> bool:
    """Whether this simulator runs `circuits`: one circuit (bound per row) of at most
    `MAX_QUBITS` qubits, made of gates and channels on one or two qubits."""
    if len(circuits) != 1 or circuits[0].num_qubits > MAX_QUBITS:
        return False
    for inst in circuits[0].data:
        name = inst.operation.name
        if name in SKIPPED or name == "save_probabilities":
            continue
        if not (name in CHANNELS or isinstance(inst.operation, Gate)) or len(inst.qubits) > 2:
            return False
    return True


def kraus_superop(kraus: Sequence[np.ndarray]) -> np.ndarray:
    """Row-major superoperator Σ K ⊗ K* of a channel given by Kraus operators."""
    return sum(np.kron(k, k.conj()) for k in kraus)


#: ρ → |0><0| Tr ρ: Kraus operators |0><0| and |0><1|
RESET_SUPEROP = kraus_superop(
    (np.array([[1, 0], [0, 0]], complex), np.array([[0, 1], [0, 0]], complex))
)[None]


def channel_superop(error: QuantumError) -> np.ndarray:
    """Row-major superoperator of a qiskit channel (qiskit stores column stacking, Σ K* ⊗ K)."""
    column = SuperOp(error).data
    d = round(np.sqrt(column.shape[0]))
    return column.reshape(d, d, d, d).transpose(1, 0, 3, 2).reshape(d * d, d * d)


def error_key(error: QuantumError) -> tuple:
    """A hashable description of a channel (its probabilities and its circuits' data), so that
    equal channels made apart are converted once."""
    return tuple(
        (
            p,
            tuple(
                (i.operation.name, tuple(np.asarray(x).tobytes() for x in i.operation.params))
                for i in c.data
            ),
        )
        for c, p in zip(error.circuits, error.probabilities, strict=True)
    )


def swap_qubits(superop: np.ndarray) -> np.ndarray:
    """A batch (rows, 16, 16) of two-qubit superoperators with their two qubits exchanged
    (index bits b1 b0 → b0 b1)."""
    t = superop.reshape(-1, *([2] * 8))  # axes: rows, i1 i0 j1 j0 | i1' i0' j1' j0'
    return t.transpose(0, 2, 1, 4, 3, 6, 5, 8, 7).reshape(-1, 16, 16)


def on_pair(single: np.ndarray, local: int) -> np.ndarray:
    """A batch (rows, 4, 4) of one-qubit superoperators as (rows, 16, 16) on local qubit
    `local` (0 = the lower) of a pair, the identity on the other."""
    eye = np.eye(2)
    t = single.reshape(-1, 2, 2, 2, 2)  # i j | i' j'
    if local == 0:  # out (I1, i, J1, j), in (I1', i', J1', j')
        full = np.einsum("AC,BD,rabcd->rAaBbCcDd", eye, eye, t)
    else:
        full = np.einsum("AC,BD,rabcd->raAbBcCdD", eye, eye, t)
    return full.reshape(-1, 16, 16)


@dataclass
class _Block:
    """A fused superoperator (rows or 1, L, L) on sorted circuit qubits."""

    qubits: tuple[int, ...]
    superop: np.ndarray


@dataclass(frozen=True)
class _Save:
    """Save the probabilities of `qubits` under `label` (as qiskit-aer's save_probabilities)."""

    label: str
    qubits: tuple[int, ...]


def _bound_matrices(op: Gate, binds: Sequence[dict]) -> np.ndarray:
    """(rows, d, d) matrices of a parameterised gate, bound to each row."""
    mats = []
    for bind in binds:
        values = [
            float(p.bind({q: bind[q.name] for q in p.parameters}))
            if isinstance(p, ParameterExpression)
            else p
            for p in op.params
        ]
        mats.append(type(op)(*values).to_matrix())
    return np.array(mats)


def _unitary_superop(u: np.ndarray) -> np.ndarray:
    """(rows, d², d²) superoperators U ⊗ U* of (rows, d, d) unitaries."""
    d2 = u.shape[1] ** 2
    return np.einsum("rik,rjl->rijkl", u, u.conj()).reshape(len(u), d2, d2)


class Converter:
    """Superoperators of a circuit's instructions, each distinct one converted once for all
    the batches of a run (qiskit's `SuperOp` conversion is the slow part of fusing)."""

    def __init__(self, errors: ErrorTable) -> None:
        self.errors = errors
        self._after: dict[tuple[str, tuple[int, ...]], np.ndarray | None] = {}
        self._channels: dict[tuple, np.ndarray] = {}
        self._keys: dict[int, tuple] = {}  # id(instruction) -> (instruction, error_key)
        self._gates: dict[tuple, np.ndarray] = {}

    def channel(self, op) -> np.ndarray:
        """(1, L, L) superoperator of a noise-channel instruction; equal channels share it."""
        if id(op) not in self._keys:  # one instruction appended many times: keyed once
            self._keys[id(op)] = (op, error_key(op._quantum_error))
        key = self._keys[id(op)][1]
        if key not in self._channels:
            self._channels[key] = channel_superop(op._quantum_error)[None]
        return self._channels[key]

    def gate(self, op: Gate, binds: Sequence[dict]) -> np.ndarray:
        """(rows or 1, L, L) superoperator U ⊗ U* of a gate, bound to each row when it has
        parameters; fixed gates are converted once per value."""
        if any(isinstance(p, ParameterExpression) for p in op.params):
            return _unitary_superop(_bound_matrices(op, binds))
        key = (op.name, tuple(np.asarray(p).tobytes() for p in op.params))
        if key not in self._gates:
            self._gates[key] = _unitary_superop(op.to_matrix()[None])
        return self._gates[key]

    def after(self, name: str, qubits: tuple[int, ...]) -> np.ndarray | None:
        """(1, L, L) superoperator of the processor error after `name` on `qubits`, if any."""
        key = (name, qubits)
        if key not in self._after:
            error = self.errors.get(key)
            self._after[key] = None if error is None else channel_superop(error)[None]
        return self._after[key]


class _Fuser:
    """Fuses a circuit's instructions into blocks and saves, in order."""

    def __init__(self) -> None:
        self.items: list[_Block | _Save] = []
        self.pending: dict[int, np.ndarray] = {}  # qubit -> (rows, 4, 4) one-qubit superop
        self.last: dict[int, int] = {}  # qubit -> index of its last block in items

    def one(self, qubit: int, superop: np.ndarray) -> None:
        """Hold a one-qubit superoperator until the next two-qubit block on its qubit."""
        before = self.pending.get(qubit)
        self.pending[qubit] = superop if before is None else superop @ before

    def two(self, qubits: tuple[int, int], superop: np.ndarray) -> None:
        """A two-qubit superoperator (qiskit qubit order), after the held ones on its qubits;
        merged into the last block when that block is on the same pair and last on both."""
        a, b = qubits
        if a > b:
            a, b, superop = b, a, swap_qubits(superop)
        for local, q in enumerate((a, b)):
            single = self.pending.pop(q, None)
            if single is not None:
                superop = superop @ on_pair(single, local)
        i, j = self.last.get(a), self.last.get(b)
        if i is not None and i == j and self.items[i].qubits == (a, b):
            block = self.items[i]
            block.superop = superop @ block.superop
            return
        self.items.append(_Block((a, b), superop))
        self.last[a] = self.last[b] = len(self.items) - 1

    def flush(self) -> None:
        """Place the held one-qubit superoperators: into their qubit's last block when nothing
        follows it, else as blocks of their own."""
        for q, single in sorted(self.pending.items()):
            i = self.last.get(q)
            block = self.items[i] if i is not None else None
            if block is not None and all(self.last.get(p) == i for p in block.qubits):
                if len(block.qubits) == 1:
                    block.superop = single @ block.superop
                else:
                    block.superop = on_pair(single, block.qubits.index(q)) @ block.superop
            else:
                self.items.append(_Block((q,), single))
                self.last[q] = len(self.items) - 1
        self.pending.clear()

    def save(self, label: str, qubits: tuple[int, ...]) -> None:
        self.flush()
        self.items.append(_Save(label, qubits))
        self.last.clear()


def fuse(circuit: QuantumCircuit, convert: Converter, binds: Sequence[dict]) -> list:
    """The blocks and saves of `circuit` bound to each of `binds` (name → value per row)."""
    fuser = _Fuser()
    for inst in circuit.data:
        op = inst.operation
        name = op.name
        qubits = tuple(circuit.find_bit(q).index for q in inst.qubits)
        if name in SKIPPED:
            continue
        if name == "save_probabilities":
            fuser.save(op.label, qubits)
            continue
        if name == "reset":
            superop = RESET_SUPEROP
        elif name == "quantum_channel":
            superop = convert.channel(op)
        elif isinstance(op, Gate):
            superop = convert.gate(op, binds)
        else:
            raise Unsupported(f"instruction {name!r} is not supported by the superop engine")
        error = convert.after(name, qubits)
        if error is not None:
            superop = error @ superop
        if len(qubits) == 1:
            fuser.one(qubits[0], superop)
        elif len(qubits) == 2:
            fuser.two(qubits, superop)
        else:
            raise Unsupported(f"{len(qubits)}-qubit instruction {name!r}")
    fuser.flush()
    return fuser.items


@njit(nogil=True, cache=True, fastmath=True)
def _spread(index, positions, count):
    """`index` with a zero bit inserted at each of the sorted `positions`."""
    for t in range(count):
        p = positions[t]
        low = index & ((1 << p) - 1)
        index = ((index >> p) << (p + 1)) | low
    return index


@njit(nogil=True, cache=True)
def _local_offsets(pos, w, dim):
    """State offsets of the L = 4^w elements a block mixes, in row-major local order."""
    half = 1 << w
    local = np.empty(half * half, np.int64)
    for m in range(half * half):
        i, j = m // half, m % half
        ri = 0
        cj = 0
        for t in range(w):
            ri |= ((i >> t) & 1) << pos[t]
            cj |= ((j >> t) & 1) << pos[t]
        local[m] = ri * dim + cj
    return local


@njit(nogil=True, cache=True)
def _bases(pos, w, dim):
    """State offsets of every group of elements a block on `pos` mixes together."""
    groups = dim >> w
    out = np.empty(groups * groups, np.int64)
    for rg in range(groups):
        r0 = _spread(rg, pos, w) * dim
        for cg in range(groups):
            out[rg * groups + cg] = r0 + _spread(cg, pos, w)
    return out


@njit(nogil=True, cache=True)
def _shared_block(re, im, local, bases, matrix, k0, k1, vbuf, wbuf):
    """One block, the same for every row: gather all groups into the real vector
    [Re; Im] (2L, groups·rows), multiply by the real form [[A, -B], [B, A]] of S = A + iB
    (one BLAS gemm), scatter back."""
    length = local.size
    n = k1 - k0
    cols = bases.size * n
    v = vbuf[: 2 * length * cols].reshape((2 * length, cols))
    w = wbuf[: 2 * length * cols].reshape((2 * length, cols))
    for g in range(bases.size):
        for m in range(length):
            at = bases[g] + local[m]
            for k in range(n):
                v[m, g * n + k] = re[at, k0 + k]
                v[length + m, g * n + k] = im[at, k0 + k]
    np.dot(matrix, v, w)
    for g in range(bases.size):
        for m in range(length):
            at = bases[g] + local[m]
            for k in range(n):
                re[at, k0 + k] = w[m, g * n + k]
                im[at, k0 + k] = w[length + m, g * n + k]


@njit(nogil=True, cache=True, fastmath=True)
def _row_block(re, im, local, bases, cr, ci, k0, k1):
    """One block with a superoperator per row (cr, ci: (L·L, rows))."""
    length = local.size
    n = k1 - k0
    vr = np.empty((length, n))
    vi = np.empty((length, n))
    ar = np.empty(n)
    ai = np.empty(n)
    for base in bases:
        for m in range(length):
            for k in range(n):
                vr[m, k] = re[base + local[m], k0 + k]
                vi[m, k] = im[base + local[m], k0 + k]
        for o in range(length):
            ar[:] = 0.0
            ai[:] = 0.0
            for m in range(length):
                e = o * length + m
                for k in range(n):
                    sr, si = cr[e, k0 + k], ci[e, k0 + k]
                    ar[k] += sr * vr[m, k] - si * vi[m, k]
                    ai[k] += sr * vi[m, k] + si * vr[m, k]
            for k in range(n):
                re[base + local[o], k0 + k] = ar[k]
                im[base + local[o], k0 + k] = ai[k]


@njit(nogil=True, cache=True)
def _run(re, im, kinds, qubits, widths, offsets, real, cr, ci, saves, k0, k1):
    """Apply the packed blocks to rows k0..k1 of the state (re, im: (4^q, rows)). Kind 0: a
    shared block, its real form at `offsets` in `real`; kind 2: a per-row block, rows of
    (cr, ci) from `offsets`; kind 1: a save, the diagonal into `saves[s, :, rows]`."""
    size = re.shape[0]
    dim = 1
    while dim * dim < size:
        dim *= 2
    vbuf = np.empty(2 * size * (k1 - k0))
    wbuf = np.empty_like(vbuf)
    s = 0
    for b in range(len(kinds)):
        if kinds[b] == 1:
            for r in range(dim):
                for k in range(k0, k1):
                    saves[s, r, k] = re[r * dim + r, k]
            s += 1
            continue
        w = widths[b]
        local = _local_offsets(qubits[b], w, dim)
        bases = _bases(qubits[b], w, dim)
        length = local.size
        off = offsets[b]
        if kinds[b] == 0:
            matrix = real[off : off + 4 * length * length].reshape((2 * length, 2 * length))
            _shared_block(re, im, local, bases, matrix, k0, k1, vbuf, wbuf)
        else:
            sl = slice(off, off + length * length)
            _row_block(re, im, local, bases, cr[sl], ci[sl], k0, k1)


def _real_form(superop: np.ndarray) -> np.ndarray:
    """[[A, -B], [B, A]] of S = A + iB: S acting on [Re v; Im v]."""
    a, b = superop.real, superop.imag
    return np.block([[a, -b], [b, a]])


def _pack(items: list, rows: int):
    """Flat arrays of the blocks for `_run`."""
    kinds, qubits, widths, offsets, real, per_row = [], [], [], [], [], []
    real_size = row_size = 0
    for item in items:
        if isinstance(item, _Save):
            kinds.append(1)
            qubits.append((0, 0))
            widths.append(0)
            offsets.append(0)
            continue
        sup = item.superop
        qubits.append((*item.qubits, 0)[:2])
        widths.append(len(item.qubits))
        if sup.shape[0] == 1:
            kinds.append(0)
            offsets.append(real_size)
            real.append(_real_form(sup[0]).ravel())
            real_size += real[-1].size
        else:
            kinds.append(2)
            offsets.append(row_size)
            per_row.append(sup.reshape(rows, -1).T)  # (L·L, rows)
            row_size += per_row[-1].shape[0]
    rowwise = np.concatenate(per_row) if per_row else np.zeros((1, rows), complex)
    return (
        np.array(kinds, np.int64),
        np.array(qubits, np.int64),
        np.array(widths, np.int64),
        np.array(offsets, np.int64),
        np.concatenate(real) if real else np.zeros(1),
        np.ascontiguousarray(rowwise.real),
        np.ascontiguousarray(rowwise.imag),
    )


def marginal(diagonal: np.ndarray, num_qubits: int, qubits: tuple[int, ...]) -> np.ndarray:
    """(rows, 2^k) probabilities of `qubits` (qubits[0] the lowest bit) from the (2^q, rows)
    diagonal of ρ."""
    t = diagonal.reshape(*([2] * num_qubits), -1)  # axes: qubit q-1 ... qubit 0, rows
    keep = [num_qubits - 1 - q for q in reversed(qubits)]
    rest = tuple(a for a in range(num_qubits) if a not in keep)
    t = t.sum(axis=rest) if rest else t
    ranks = np.argsort(np.argsort(keep))  # kept axis t of the result: sorted position ranks[t]
    t = t.transpose(*ranks, len(keep))
    return t.reshape(2 ** len(qubits), -1).T


def simulate_rows(
    circuit: QuantumCircuit, errors: ErrorTable | Converter, binds: Sequence[dict]
) -> list:
    """The data of each row (one per bind): {save label: probabilities}, starting from |0…0>.
    `errors`: the processor's error table, or a `Converter` kept across batches."""
    q, rows = circuit.num_qubits, len(binds)
    convert = errors if isinstance(errors, Converter) else Converter(errors)
    items = fuse(circuit, convert, binds)
    packed = _pack(items, rows)
    saves = [item for item in items if isinstance(item, _Save)]
    re = np.zeros((4**q, rows))
    im = np.zeros_like(re)
    re[0] = 1.0
    diag = np.zeros((max(1, len(saves)), 2**q, rows))
    threads = max(1, min(process_threads(), rows))
    bounds = np.linspace(0, rows, threads + 1).astype(int)
    jobs = [(int(a), int(b)) for a, b in pairwise(bounds) if b > a]
    # the row ranges run on this process's threads, each with a one-thread BLAS
    with threadpool_limits(1, user_api="blas"), ThreadPoolExecutor(len(jobs)) as pool:
        list(pool.map(lambda ab: _run(re, im, *packed, diag, *ab), jobs))
    data = [{} for _ in range(rows)]
    for s, save in enumerate(saves):
        probs = marginal(diag[s], q, save.qubits)
        for r in range(rows):
            data[r][save.label] = probs[r]
    return data


class SuperopSimulator:
    """The runner `circuit.run_rows` uses for a noisy program this module `supports`; one per
    run, so each distinct instruction is converted once for all its batches."""

    def __init__(self, errors: ErrorTable) -> None:
        self.convert = Converter(errors)

    def run_batch(self, circuits, columns: dict[str, np.ndarray], start: int, stop: int):
        """The data of rows start..stop of the one circuit, bound to `columns`."""
        binds = [{name: float(col[i]) for name, col in columns.items()} for i in range(start, stop)]
        return simulate_rows(circuits[0], self.convert, binds)
