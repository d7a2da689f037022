"""Is every certificate true? A seeded sweep against exact references, counting falsehoods.

Small instances (3 to 9 jobs on 1 to 4 nodes), about half on identical nodes and half on
farms (speeds 0.5, 1, 2 and 3; nodes busy until up to 1.7 times the longest job; a GPU
tag some jobs need), durations from 1e-9 to 1e12 s (many ties, near ties such as 1e9+3
against 1e9+2, or spread; written as multiples of a power of two, where every sum is
exact, or as decimals, where it is not; 1 instance in 20 at 1e16 to 4.6e18 s, past the
tick limit at the finer resolutions), resolutions from 1e-6 to 1e6 s, deadlines a hair
below, at and around the optimum. Every instance is planned by every method (``list``,
``longest_first``, ``exact``, ``auto``; the search methods with ``--budget`` seconds) and
sized (the fewest nodes of one kind for a deadline). The truth comes from
``tests/reference.py``, which uses no spanwright code: the exact optimum by branch and
bound in rational arithmetic, the exact fewest nodes (the smallest k whose exact optimum
on k nodes is within the deadline), the exact plan check. All comparisons are exact
(``Fraction`` of the stated floats).

Counted per method: instances; refused (InvalidInstance past 2**53 ticks, as they should
be); false bounds (``lower_bound`` or a named bound above the optimum; for sizing,
``nodes_lower_bound`` above the fewest nodes); false optima (``proven_optimal`` at a
makespan other than the optimum (the plan's exact makespan, and the stated one rounded
to the nearest float), or ``gap == 0`` not matching ``proven_optimal``; for
sizing, proven at a count other than the fewest); false provably_unreachable (a deadline
the optimum meets); infeasible plans (a job before its node's ``free_at``, overlapping
jobs, a job twice, missing or on a node without its tag, stated times off their duration
beyond rounding; for sizing also a node whose exact work misses the deadline); wrong
refusals (InvalidInstance for an instance below 2**50 ticks, or no refusal for one past
2**56); crashes, by exception type; wrong sizings (any sizing above, or a count below
the fewest, or Infeasible exactly when a plan exists). Exit status 1 when any of these
is not zero. ``--show K`` prints K instances of each kind of failure; ``--instance I``
runs one instance and prints every problem found.

    python bench/truth.py                              # 3,000 instances, 2 processes
    python bench/truth.py --instances 300 --seed 7 --budget 0.05 --jobs 2
    python bench/truth.py --seed 1 --instance 1234     # one instance, in detail
"""

from __future__ import annotations

import argparse
import math
import random
import sys
import time
from collections import Counter
from concurrent.futures import ProcessPoolExecutor
from fractions import Fraction
from pathlib import Path
from typing import Any

ROOT = Path(__file__).resolve().parent.parent
sys.path.insert(0, str(ROOT))
sys.path.insert(0, str(ROOT / "tests"))

import reference as ref  # noqa: E402  (the exact oracle of the tests)

METHODS = ("list", "longest_first", "exact", "auto")
ROWS = (*METHODS, "size")
RESOLUTIONS = (1e-6, 1e-3, 0.1, 1.0, 7.0, 60.0, 1e3, 1e6)
#: below this many ticks an instance must be accepted; with one job past REFUSE_TICKS
#: (2**53 at any speed up to 4) it must be refused
ACCEPT_TICKS, REFUSE_TICKS = 2**50, 2**56
COUNTS = (
    "false bounds",
    "false optima",
    "false unreachable",
    "infeasible plans",
    "wrong refusals",
    "crashes",
    "wrong sizings",
)
PLAIN: frozenset[str] = frozenset()


# -- instances --------------------------------------------------------------------------
def durations(rnd: random.Random, n: int) -> list[float]:
    """One flavour of durations, the longest about 2**top s (1e-9 to 1e12 s)."""
    flavour = rnd.choice(["ties", "near", "spread"])
    if flavour == "ties":
        ints = [rnd.randint(1, 12) for _ in range(n)]
    elif flavour == "near":
        base = rnd.choice([2**30, 10**9])
        ints = [base + rnd.randint(0, 6) for _ in range(n)]
    else:
        ints = [rnd.randint(1, 2**20) for _ in range(n)]
    # 1 in 20 far past the scale (1e16 to 4.6e18 s): the refusals and the overflows
    top = rnd.randint(-30, 40) if rnd.random() >= 0.05 else rnd.randint(53, 62)
    if rnd.random() < 0.5:
        return [math.ldexp(i, top - max(ints).bit_length()) for i in ints]
    exp10 = round(top * math.log10(2)) - len(str(max(ints))) + 1
    return [float(f"{i}e{exp10}") for i in ints]


def instance(seed: int, i: int) -> dict[str, Any]:
    """Instance ``i`` of the sweep of ``seed`` (independent of every other instance)."""
    rnd = random.Random(f"truth:{seed}:{i}")
    n, m = rnd.randint(3, 9), rnd.randint(1, 4)
    d = durations(rnd, n)
    farm = rnd.random() < 0.5
    tags = farm and rnd.random() < 0.5
    nodes = []
    for k in range(m):
        if not farm:
            nodes.append((1.0, 0.0, PLAIN))
            continue
        speed = rnd.choice([0.5, 1.0, 2.0, 3.0])
        free_at = rnd.choice([0.0, 0.0, 0.5, 1.0, 1.7]) * max(d)
        gpu = tags and (k == 0 or rnd.random() < 0.5)
        nodes.append((speed, free_at, frozenset({"gpu"}) if gpu else PLAIN))
    requires = [frozenset({"gpu"}) if rnd.random() < 0.5 else PLAIN for _ in d] if tags else None
    opt = ref.exact_optimum(d, nodes, requires)
    size_speed = nodes[0][0]
    size_where = rnd.choice(["below", "at", "under", "over", "infeasible"])
    longest = Fraction(max(d)) / Fraction(size_speed)
    if size_where == "infeasible":  # one float below the longest job: no count can do it
        size_deadline = ref.float_below(longest)
    else:
        k = rnd.randint(1, n)
        on_k = ref.exact_optimum(d, [(size_speed, 0.0, nodes[0][2])] * k, requires)
        size_deadline = max(ref.float_near(on_k, size_where), ref.float_at_or_above(longest))
    return {
        "index": i,
        "durations": d,
        "nodes": nodes,
        "requires": requires,
        "resolution": rnd.choice(RESOLUTIONS),
        "deadline": ref.float_near(opt, rnd.choice(["below", "at", "under", "over"])),
        "opt": opt,
        "size_speed": size_speed,
        "size_provides": nodes[0][2],
        "size_deadline": size_deadline,
    }


def ticks(inst: dict[str, Any], sizing: bool = False) -> tuple[Fraction, Fraction]:
    """(the largest tick count the plan or the sizing can reach, the longest job in ticks)."""
    d, r = inst["durations"], inst["resolution"]
    if sizing:
        most = ref.tick_count(d, [(inst["size_speed"], 0.0, PLAIN)], r, inst["size_deadline"])
    else:
        most = ref.tick_count(d, inst["nodes"], r, inst["deadline"])
    return most, Fraction(max(d)) / Fraction(r)


def describe(inst: dict[str, Any]) -> str:
    keys = ("durations", "nodes", "requires", "resolution", "deadline", "size_deadline")
    return f"#{inst['index']} " + " ".join(f"{k}={inst[k]!r}" for k in keys)


# -- checks -----------------------------------------------------------------------------
def ids(n: int) -> list[str]:
    return [f"j{i}" for i in range(n)]


def refused(exc: Exception, most: int) -> tuple[list[str], list[str]]:
    """(failure kinds, sentences) of an instance that raised ``exc``: a refusal
    (InvalidInstance), wrong below 2**50 ticks, or a crash, which this bench counts."""
    from workers.planning import InvalidInstance

    if not isinstance(exc, InvalidInstance):
        return [f"crash {type(exc).__name__}"], [f"{type(exc).__name__}: {exc}"]
    if most <= ACCEPT_TICKS:
        return ["wrong refusals"], [f"refused below 2**50 ticks: {exc}"]
    return ["refused"], []


def check_plan(inst: dict[str, Any], method: str, budget: float) -> tuple[list[str], list[str]]:
    """(failure kinds, sentences) of one method on one instance."""
    from workers.planning import Instance, Node, solve

    d, nodes, opt = inst["durations"], inst["nodes"], inst["opt"]
    most, longest = ticks(inst)
    try:
        built = Instance.build(
            d,
            [Node(f"n{k}", s, frozenset(p), f) for k, (s, f, p) in enumerate(nodes)],
            job_ids=ids(len(d)),
            requires=inst["requires"],
            deadline=inst["deadline"],
            resolution=inst["resolution"],
        )
        r = solve(built, method, time_budget=budget).to_dict()
    except Exception as exc:  # a refusal, or a crash (which this bench counts)
        return refused(exc, most)
    kinds: list[str] = []
    why: list[str] = []
    above = {k: v for k, v in r["bounds"].items() if Fraction(v) > opt}
    if Fraction(r["lower_bound"]) > opt or above:
        kinds.append("false bounds")
        why.append(f"lower bound {r['lower_bound']!r} {above} > optimum {float(opt)!r}")
    # proven: the plan's exact makespan is the optimum, stated rounded to the nearest float
    proven_wrong = r["proven_optimal"] and (
        r["makespan"] != float(opt) or ref.exact_plan_makespan(r, d, nodes, ids(len(d))) != opt
    )
    if proven_wrong or ((r["gap"] == 0) != r["proven_optimal"]):
        kinds.append("false optima")
        why.append(
            f"proven_optimal {r['proven_optimal']} gap {r['gap']!r} at makespan "
            f"{r['makespan']!r}, optimum {float(opt)!r} ({opt})"
        )
    if r["deadline"]["provably_unreachable"] and Fraction(inst["deadline"]) >= opt:
        kinds.append("false unreachable")
        why.append(f"deadline {inst['deadline']!r} called unreachable, optimum {float(opt)!r}")
    problems = ref.plan_problems(r, d, nodes, inst["requires"], ids(len(d)))
    if problems:
        kinds.append("infeasible plans")
        why.extend(problems[:3])
    if longest > REFUSE_TICKS:
        kinds.append("wrong refusals")
        why.append(f"accepted a job of {float(longest):.3g} ticks, past 2**53")
    return kinds, why


def check_sizing(inst: dict[str, Any], budget: float) -> tuple[list[str], list[str]]:
    """(failure kinds, sentences) of sizing on one instance."""
    from workers.planning import Infeasible, Node
    from workers.planning.sizing import size

    d, speed, deadline = inst["durations"], inst["size_speed"], inst["size_deadline"]
    provides = inst["size_provides"] | (frozenset({"gpu"}) if inst["requires"] else PLAIN)
    truth = ref.exact_min_nodes(d, deadline, speed, provides, inst["requires"])
    most, longest = ticks(inst, sizing=True)
    try:
        r = size(
            d,
            deadline,
            Node("node", speed, provides),
            job_ids=ids(len(d)),
            requires=inst["requires"],
            resolution=inst["resolution"],
            time_budget=budget,
        ).to_dict()
    except Infeasible as exc:
        if truth is None:
            return [], []
        return ["wrong sizings"], [f"Infeasible, but {truth} node(s) can: {exc}"]
    except Exception as exc:  # a refusal, or a crash (which this bench counts)
        return refused(exc, most)
    if truth is None:
        return ["wrong sizings"], [f"{r['nodes_needed']} node(s), but no count can do it"]
    kinds: list[str] = []
    why: list[str] = []
    if r["nodes_lower_bound"] > truth:
        kinds.append("false bounds")
        why.append(f"nodes_lower_bound {r['nodes_lower_bound']} > fewest {truth}")
    if r["proven_optimal"] and r["nodes_needed"] != truth:
        kinds.append("false optima")
        why.append(f"proven at {r['nodes_needed']}, fewest {truth}")
    spec = [(speed, 0.0, provides)] * r["nodes_needed"]
    problems = ref.plan_problems(r, d, spec, inst["requires"], ids(len(d)), deadline)
    if problems:
        kinds.append("infeasible plans")
        why.extend(problems[:3])
    if r["nodes_needed"] < truth:
        why.append(f"{r['nodes_needed']} node(s), below the fewest {truth}")
    if kinds or r["nodes_needed"] < truth:
        kinds.append("wrong sizings")
    if longest > REFUSE_TICKS:
        kinds.append("wrong refusals")
        why.append(f"accepted a job of {float(longest):.3g} ticks, past 2**53")
    return kinds, why


def run(args: tuple[int, int, float]) -> list[tuple[str, int, list[str], list[str]]]:
    """Every check of one instance: (row, index, failure kinds, sentences) per row."""
    seed, i, budget = args
    inst = instance(seed, i)
    out = [(m, i, *check_plan(inst, m, budget)) for m in METHODS]
    out.append(("size", i, *check_sizing(inst, budget)))
    return out


def warm() -> None:
    """Load the compiled kernels in this process before any timed solve (through the
    public entry points only: every method on identical nodes and on a farm, and sizing;
    Graham's tight LPT family for m = 3, so the search runs)."""
    from workers.planning import Instance, Node, solve
    from workers.planning.sizing import size

    identical = Instance.build([5.0, 5.0, 4.0, 4.0, 3.0, 3.0, 3.0], 3)
    farm = Instance.build([5.0, 4.0, 3.0, 3.0], [Node("a"), Node("b", 0.5, free_at=1.0)])
    for method in METHODS:
        solve(identical, method, time_budget=0.5)
        solve(farm, method, time_budget=0.5)
    size([5.0, 4.0, 3.0, 3.0, 2.0], 7.0, time_budget=0.5)


# -- report -----------------------------------------------------------------------------
def table(results: list[tuple[str, int, list[str], list[str]]], n: int) -> tuple[list[str], int]:
    """The table, the crash lines, and the number of failures (all rows)."""
    counts = {row: Counter[str]() for row in ROWS}
    crashes = {row: Counter[str]() for row in ROWS}
    for row, _, kinds, _ in results:
        for kind in kinds:
            if kind.startswith("crash "):
                counts[row]["crashes"] += 1
                crashes[row][kind[len("crash ") :]] += 1
            else:
                counts[row][kind] += 1
    lines = [
        "| method | instances | refused | " + " | ".join(COUNTS) + " |",
        "|---|" + "---:|" * (2 + len(COUNTS)),
    ]
    failures = 0
    for row in ROWS:
        c = counts[row]
        failures += sum(c[k] for k in COUNTS)
        lines.append(
            f"| {row} | {n} | {c['refused']} | " + " | ".join(str(c[k]) for k in COUNTS) + " |"
        )
    for row in ROWS:
        if crashes[row]:
            kinds = ", ".join(f"{k} {v}" for k, v in crashes[row].most_common())
            lines.append(f"crashes of {row}: {kinds}")
    return lines, failures


def main(argv: list[str] | None = None) -> int:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--instances", type=int, default=3000)
    ap.add_argument("--seed", type=int, default=1)
    ap.add_argument("--budget", type=float, default=0.05, help="seconds per search solve")
    ap.add_argument("--jobs", type=int, default=2, help="worker processes")
    ap.add_argument("--show", type=int, default=1, help="instances shown per kind of failure")
    ap.add_argument("--instance", type=int, default=None, help="run only this instance")
    args = ap.parse_args(argv)
    t0 = time.perf_counter()
    if args.instance is not None:
        warm()
        print(describe(instance(args.seed, args.instance)))
        for row, _, kinds, why in run((args.seed, args.instance, args.budget)):
            print(f"{row}: {', '.join(kinds) or 'ok'}")
            for sentence in why:
                print(f"    {sentence}")
        return 0
    work = [(args.seed, i, args.budget) for i in range(args.instances)]
    with ProcessPoolExecutor(args.jobs, initializer=warm) as ex:
        results = [r for batch in ex.map(run, work, chunksize=8) for r in batch]
    wall = time.perf_counter() - t0
    print(
        f"{args.instances} instances, seed {args.seed}, budget {args.budget:g} s, "
        f"{args.jobs} process(es), {wall:.1f} s"
    )
    lines, failures = table(results, args.instances)
    print("\n".join(lines))
    shown = Counter[tuple[str, str]]()
    for row, i, kinds, why in results:
        for kind in kinds:
            if kind == "refused" or shown[row, kind] >= args.show:
                continue
            shown[row, kind] += 1
            print(f"{row} {kind}: {describe(instance(args.seed, i))}")
            for sentence in why[:3]:
                print(f"    {sentence}")
    return 1 if failures else 0


if __name__ == "__main__":
    raise SystemExit(main())
