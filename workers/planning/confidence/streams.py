"""Random numbers of the simulation: numpy's SFC64 stepped in a kernel, ziggurat normals.

The bits are numpy's SFC64 generator (``numpy.random.SFC64``, the Small Fast Chaotic
generator): one stream per chunk of samples, seeded by numpy from
``numpy.random.SeedSequence(seed).spawn(...)``, then stepped inside the compiled kernel
(the tests check our step against ``SFC64.random_raw`` bit for bit). The normals are made
from it by the ziggurat method of Marsaglia and Tsang (J. Stat. Software 5(8), 2000) with
256 layers, the layer index and the uniform taken from disjoint bits (the correction of
Doornik, 2005). Why not ``Generator.standard_normal``: on the benchmark machine it costs
about 13-18 ns a normal, more than the whole budget of 10 ns a draw that 10^8 draws in 1 s
allow; the compiled SFC64 step plus ziggurat makes a normal in about 4 ns there, and the
fused kernel (bits, normal, exp, per-node sum in one pass, no samples x jobs matrix in
memory) does the whole draw in about 12-14 ns of CPU (``bench/confidence.py`` prints both).
Draws are made job by job in batch order whatever the spread, the policy or the node
count, so two runs with the same seed and batch share their normals (common random
numbers): comparisons between spreads, policies and node counts are paired.
"""

from __future__ import annotations

import math
from functools import cache

import numpy as np
import numpy.typing as npt

from ..kernels import inline, jit
from ..model import FloatArray

#: ziggurat layers
ZIG_LAYERS = 256

U64Array = npt.NDArray[np.uint64]


def _layers_for(r: float, layers: int) -> tuple[float, list[float]]:
    """Area per layer and the boundaries x_1 = r > x_2 > ... for a trial tail start r."""
    v = r * math.exp(-0.5 * r * r) + math.sqrt(math.pi / 2) * math.erfc(r / math.sqrt(2))
    xs = [r]
    for _ in range(layers - 2):
        y = math.exp(-0.5 * xs[-1] ** 2) + v / xs[-1]
        if y >= 1.0:
            return v, []  # layers too thick: ran out of curve before the top
        xs.append(math.sqrt(-2.0 * math.log(y)))
    return v, xs


@cache
def ziggurat_tables(layers: int = ZIG_LAYERS) -> tuple[FloatArray, FloatArray, FloatArray]:
    """(x, k, f) of the Marsaglia-Tsang ziggurat for exp(-x^2/2), computed here.

    ``x[0] = v / f(r)`` is the width of the base strip (rectangle plus tail), ``x[1] = r``,
    ..., ``x[layers] = 0``; ``k[i] = x[i+1] / x[i]`` is the quick-accept threshold and
    ``f[i] = exp(-x[i]^2 / 2)``. ``r`` is found by bisection so that the top layer closes
    exactly at the mode (for 256 layers r = 3.6541528853610088, from memory; checked in
    the tests against that value).
    """
    lo, hi = 2.0, 5.0
    for _ in range(200):
        r = 0.5 * (lo + hi)
        v, xs = _layers_for(r, layers)
        if not xs:
            lo = r  # r too small: layers too thick
            continue
        top = math.exp(-0.5 * xs[-1] ** 2) + v / xs[-1]
        if top > 1.0:
            lo = r
        else:
            hi = r
    r = hi
    v, xs = _layers_for(r, layers)
    x = np.empty(layers + 1)
    x[0] = v / math.exp(-0.5 * r * r)
    x[1:layers] = xs
    x[layers] = 0.0
    k = np.empty(layers)
    k[:] = x[1:] / x[:-1]
    f = np.exp(-0.5 * x * x)
    return x, k, f


U64 = np.uint64


@inline
def sfc64_step(a: U64, b: U64, c: U64, w: U64) -> tuple[U64, U64, U64, U64, U64]:
    """One step of the Small Fast Chaotic generator as numpy implements it (``np.random.
    SFC64``): the word drawn and the state ``(a, b, c, w)`` after it. Inlined into the
    kernels, so the state stays in registers."""
    word = a + b + w
    return (
        word,
        b ^ (b >> U64(11)),
        c + (c << U64(3)),
        ((c << U64(24)) | (c >> U64(40))) + word,
        w + U64(1),
    )


@jit
def sfc64_raw(state: U64Array, count: int) -> U64Array:
    """``count`` raw words of numpy's SFC64 from ``state`` (advanced in place), by
    :func:`sfc64_step`; the tests check them bit for bit against ``SFC64.random_raw``.
    """
    out = np.empty(count, dtype=np.uint64)
    a, b, c, w = state[0], state[1], state[2], state[3]
    for i in range(count):
        out[i], a, b, c, w = sfc64_step(a, b, c, w)
    state[0], state[1], state[2], state[3] = a, b, c, w
    return out


@jit
def fill_normals(
    state: U64Array, out: FloatArray, x: FloatArray, k: FloatArray, f: FloatArray
) -> None:
    """Fill ``out`` with standard normals drawn from the SFC64 ``state`` (advanced in place).

    One 64-bit word per try: bits 0-7 pick the layer, bits 10-63 read as a signed number
    give ``u`` in [-1, 1) (sign and magnitude together, Marsaglia and Tsang's signed form;
    disjoint from the layer bits, as Doornik 2005 asks). A try the rectangle rejects takes
    more words, each a uniform in (0, 1): one (``u2``) for the wedge, pairs (``u2``, ``u3``)
    for the tail until a pair is accepted.

    The SFC64 step (:func:`sfc64_step`) is inlined where a word is taken (the first word
    of a try, and the further words of a rejection): the state stays in four registers,
    and the ``py_func`` twin calls it as plain Python, keeping numpy's wrapping uint64
    arithmetic.
    """
    r = x[1]
    scale = 1.0 / 9007199254740992.0  # 2**-53
    a, b, c, w = state[0], state[1], state[2], state[3]
    s11 = np.uint64(11)
    for i in range(out.shape[0]):
        while True:
            word, a, b, c, w = sfc64_step(a, b, c, w)
            layer = int(word & np.uint64(255))
            u = float(np.int64(word) >> np.int64(10)) * scale
            z = u * x[layer]
            if abs(u) < k[layer]:
                break
            u2 = -1.0  # none drawn yet
            while True:
                word, a, b, c, w = sfc64_step(a, b, c, w)
                v = (float(np.int64(word >> s11)) + 0.5) * scale  # in (0, 1)
                if u2 < 0.0:
                    u2 = v
                    if layer != 0:
                        break  # the wedge needs this one uniform
                    continue
                # the tail beyond r (Marsaglia 1964): x = r + e1 with e1 exponential of rate
                # r (from u2), accepted with probability exp(-e1^2/2) (e2 from u3 = v)
                e1 = -math.log(u2) / r
                e2 = -math.log(v)
                if e2 + e2 > e1 * e1:
                    z = r + e1 if u >= 0.0 else -(r + e1)
                    break
                u2 = -1.0  # rejected: a fresh pair
            if layer == 0:
                break
            # the wedge between the rectangle and the curve
            if f[layer] + u2 * (f[layer + 1] - f[layer]) < math.exp(-0.5 * z * z):
                break
        out[i] = z
    state[0], state[1], state[2], state[3] = a, b, c, w
