#!/usr/bin/env python
"""Exact thermally averaged free-free Gaunt factor on a (log u, log gamma^2) grid.

Computes ``gbar(u, gamma^2) = int_0^inf g(E_i = (x + u) kT, E_f = x kT) e^{-x} dx``
(u = h nu / kT, gamma^2 = Z^2 Ry / kT) from the exact non-relativistic
Sommerfeld (1931) Gaunt factor ``g(eta_i, eta_f)``, evaluated with mpmath by
``tools/gaunt_sommerfeld.py`` (Karzas & Latter 1961 / Hummer 1988 form; that
evaluation is checked there against the Born limit, its first Coulomb
correction and the large-eta limit, ``gaunt_sommerfeld.py --verify``).

Method: lines of constant photon energy
---------------------------------------
In Rydberg units (``eps = E / Z^2 Ry``, ``w = h nu / Z^2 Ry = u / gamma^2``)
the Gaunt factor of one electron depends on ``eps_f`` and ``w`` only
(``eta_f = eps_f^{-1/2}``, ``eta_i = (eps_f + w)^{-1/2}``), and the thermal
average is a Laplace transform along the line of fixed ``w``::

    gbar(u = w gamma^2, gamma^2) = int g(eps_f; w) gamma^2 exp(-gamma^2 eps_f) d eps_f
                                 = int g(e^s; w) gamma^2 e^s exp(-gamma^2 e^s) ds.

So ``g`` is evaluated once per node of a grid in ``s = ln eps_f`` on each line
and every grid point ``(u, gamma^2)`` on that line is a weighted sum of the
same values. The integrand in ``s`` is smooth and decays double-exponentially
on the right and like ``e^s`` on the left, so the trapezoidal rule converges
spectrally (the weight alone: error ~ exp(-pi^2 / h); h = 0.5 gives ~3e-9).
Below the first node ``s_min`` (where mpmath's series stops converging, or
the evaluation gets slow, for cold electrons) ``g`` approaches its threshold
value linearly in ``eps_f``; the nodes are continued there with the
straight line through the first two, so that the trapezoidal rule still
covers the whole integrand, with an error bound from the third node's
departure from the line. The grid in (log u, log gamma^2)
uses one step ``d`` (decades) for both, so its ``w`` values are themselves a
uniform grid in log w: ``(u range x gamma^2 range) / d^2`` points need only
``(decades of w) / d`` lines.

Cost
----
``g`` costs 0.003 s to 2 s per evaluation with mpmath (dps 30), growing with
``eta`` (cold electrons, gamma^2 eps_f << 1, are the expensive ones). ``--plan``
times a sample of nodes and estimates the whole table; at ``d = 0.1`` and
``h = 0.5`` that is of order 10^4 evaluations (hours on one core). Lines are
written to ``--out`` as they finish (one CSV row per grid point), so a run can
be stopped and resumed (``--resume``).

Usage::

    python tools/gaunt_table.py --plan                 # cost estimate, nothing written
    python tools/gaunt_table.py --verify               # limits and spot points, a few minutes
    nice -n 19 python tools/gaunt_table.py --out gbar_table.csv [--step 0.1] [--h 0.5] [--resume]
    python tools/gaunt_table.py --out part.csv --lines -7.5 -7.4   # only lines with log10 w in [a, b]
    python tools/gaunt_table.py --points 300 --seed 1 --out tests/data/gaunt_offnode.csv   # random off-node points

Verification (``--verify``)
---------------------------
* Born limit: for gamma^2 = 1e-6 and 1e-4 the average must equal the exact
  thermal average of the Born Gaunt factor, ``(sqrt(3)/pi) e^{u/2} K_0(u/2)``
  (Karzas & Latter 1961, from memory; checked in ``gaunt_sommerfeld.py``),
  plus its first Coulomb correction, O(gamma), from the Elwert factor
  (:func:`elwert_coefficient`), to O(gamma^2).
* Classical soft-photon limit (Oster 1961, Rev. Mod. Phys. 33, 525):
  ``(sqrt(3)/pi)[ln(4 / (u gamma)) - 5 gamma_E / 2]`` for gamma^2 >> 1 and
  ``w = u gamma << 1``.
* Spot points: the independent adaptive Gauss-Legendre quadrature in ``x`` of
  ``tools/gaunt_sommerfeld.py`` (``tests/data/gaunt_sommerfeld.csv``, a
  different integration variable, rule and treatment of the threshold).
* Step convergence: the same points with ``h`` and ``h / 2``.
"""

import argparse
import math
import os
import sys
import time

import mpmath as mp

sys.path.insert(0, os.path.dirname(os.path.abspath(__file__)))
import gaunt_sommerfeld as gs  # noqa: E402  (the checked evaluation of g)

U_RANGE = (-6.0, 2.0)  # log10 u
G2_RANGE = (-6.0, 6.0)  # log10 gamma^2
TAIL_RIGHT = 40.0  # gamma^2 eps_f up to this (e^-40 = 4e-18)
TAIL_LEFT = 14.0  # ln(gamma^2 eps_f) down to -14 (weight e^-14 = 8e-7 below)
ETA_MAX = 3.0e4  # colder electrons (eta_f above this) are evaluated only while it stays cheap:
ETA_HARD = 1.0e6  # up to this eta_f, while each evaluation takes under SLOW_S seconds (mpmath's
SLOW_S = 2.0  # hyp2f1 needs seconds there and fails to converge when both eta are ~1e5)


def g_exact(eps_f, w):
    """Sommerfeld Gaunt factor for final energy ``eps_f`` and photon energy ``w`` (Z^2 Ry units)."""
    eta_f = 1 / mp.sqrt(mp.mpf(eps_f))
    eta_i = 1 / mp.sqrt(mp.mpf(eps_f) + mp.mpf(w))
    return gs.gaunt_sommerfeld(eta_i, eta_f)


def line_nodes(log_g2_values, h):
    """Nodes ``s = ln eps_f`` covering the integrands of all ``gamma^2`` on one line (step ``h``)."""
    lo = min(-v * math.log(10) for v in log_g2_values) - TAIL_LEFT
    hi = max(-v * math.log(10) for v in log_g2_values) + math.log(TAIL_RIGHT)
    n = int(math.ceil((hi - lo) / h))
    return [lo + k * h for k in range(n + 1)]


def average(g_values, nodes, h, gamma2):
    """Trapezoidal Laplace average of one line's ``g`` at ``gamma2``: ``(gbar, error bound of the cold piece)``.

    Below the first node (where mpmath's series stops converging, or the evaluation gets slow, for cold
    electrons) ``g`` approaches its threshold value linearly in ``eps_f`` (measured: successive
    differences grow by e^h to 1e-3), ``g ~ g_inf + c eps_f`` with ``c`` and ``g_inf`` from the first two
    nodes. The nodes are continued to the left with that line until ``gamma^2 eps_f < 1e-16``, so the
    trapezoidal rule runs over the whole integrand (cutting it where it is not small would cost an
    O(h^2) end error); what is left below is ``g_inf gamma^2 eps_f``. The bound is twice the third
    node's departure from the line, times the weight of the modelled piece, ``1 - exp(-gamma^2 eps_0)``.
    """
    gamma2 = mp.mpf(gamma2)
    e0, e1, e2 = (mp.exp(v) for v in nodes[:3])
    c = (g_values[1] - g_values[0]) / (e1 - e0)
    g_inf = g_values[0] - c * e0
    total = mp.mpf(0)
    for s, g in zip(nodes, g_values, strict=True):
        x = gamma2 * mp.exp(s)
        total += g * x * mp.exp(-x)
    s = nodes[0]
    while True:
        s -= h
        eps = mp.exp(s)
        x = gamma2 * eps
        if x < mp.mpf(10) ** -16:
            break
        total += (g_inf + c * eps) * x * mp.exp(-x)
    total *= h
    total += g_inf * gamma2 * mp.exp(s + h / 2)  # int_{-inf}^{s + h/2} g_inf x ds (x e^-x ~ x there)
    x0 = gamma2 * e0
    curvature = abs(g_values[2] - (g_values[0] + c * (e2 - e0)))
    return total, 2 * curvature * -mp.expm1(-x0)


def grid_lines(step):
    """``{k: [log10 gamma^2 ...]}``: for each line log10 w = k step, the grid's gamma^2 values on it."""
    nu = int(round((U_RANGE[1] - U_RANGE[0]) / step))
    ng = int(round((G2_RANGE[1] - G2_RANGE[0]) / step))
    lines = {}
    for i in range(nu + 1):
        lu = U_RANGE[0] + i * step
        for j in range(ng + 1):
            lg = G2_RANGE[0] + j * step
            k = int(round((lu - lg) / step))
            lines.setdefault(k, []).append(lg)
    return lines


def line_values(nodes, w):
    """``g`` at the nodes from the warm end toward the cold one, stopping where it cannot be evaluated.

    Returns the nodes and values kept (a suffix of ``nodes``, in increasing ``s``): the first node
    with ``eta_f > ETA_HARD``, or beyond ``ETA_MAX`` one that took more than ``SLOW_S``, or where
    mpmath's series does not converge ends the line, and the
    threshold piece of :func:`average` stands for everything colder (with its error bound).
    """
    kept = []
    for s in reversed(nodes):
        eta_f = math.exp(-s / 2)
        if eta_f > ETA_HARD:
            break
        t0 = time.perf_counter()
        try:
            kept.append((s, g_exact(mp.exp(s), w)))
        except mp.libmp.NoConvergence:
            break
        if eta_f > ETA_MAX and time.perf_counter() - t0 > SLOW_S:
            break
    kept.reverse()
    return [k[0] for k in kept], [k[1] for k in kept]


def compute_line(log_w, log_g2_values, h):
    """``[(log10 u, log10 gamma^2, gbar, err)]`` on one line of fixed photon energy."""
    w = mp.mpf(10) ** log_w
    nodes, g_values = line_values(line_nodes(log_g2_values, h), w)
    rows = []
    for lg in log_g2_values:
        gbar, err = average(g_values, nodes, h, mp.mpf(10) ** lg)
        rows.append((lg + log_w, lg, gbar, err))
    return rows


def plan(step, h, sample=16):
    """Time ``sample`` nodes spread over the table's lines and estimate the total."""
    lines = grid_lines(step)
    per_line = {k: [s for s in line_nodes(v, h) if math.exp(-s / 2) <= ETA_MAX] for k, v in lines.items()}
    total_nodes = sum(len(v) for v in per_line.values())
    keys = sorted(lines)
    spent, failed = 0.0, 0
    for i in range(sample):
        k = keys[int(i * (len(keys) - 1) / (sample - 1))]
        nodes = per_line[k]
        s = nodes[(i * 7919) % len(nodes)]  # spread over the line, cold and warm nodes alike
        t0 = time.perf_counter()
        try:
            g_exact(mp.exp(s), mp.mpf(10) ** (k * step))
        except mp.libmp.NoConvergence:
            failed += 1
        spent += time.perf_counter() - t0
    per = spent / sample
    print(
        f"step {step} decades, h = {h}: {len(lines)} lines, {total_nodes} evaluations of g (eta_f <= {ETA_MAX:g}); "
        f"sampled {per:.3f} s each ({failed} of {sample} did not converge) -> about "
        f"{total_nodes * per / 3600:.1f} h on one core"
    )


def elwert_coefficient(u_):
    """D gbar / d gamma at gamma = 0: the thermal average of g_Born pi (eta_f - eta_i) / gamma.

    To first order in eta the Sommerfeld factor is the Born one times the Elwert factor
    ``(eta_f / eta_i)(1 - e^{-2 pi eta_i}) / (1 - e^{-2 pi eta_f}) = 1 + pi (eta_f - eta_i) + O(eta^2)``
    (Elwert 1939, Ann. Phys. 426, 178, from memory), with ``eta = gamma / sqrt(energy / kT)``;
    ``g_Born = (sqrt(3)/pi) ln[(sqrt(x + u) + sqrt(x)) / (sqrt(x + u) - sqrt(x))]``.
    """
    sqrt3_pi = mp.sqrt(3) / mp.pi

    def f(x):
        a, b = mp.sqrt(x + u_), mp.sqrt(x)
        return sqrt3_pi * mp.log((a + b) / (a - b)) * mp.pi * (1 / b - 1 / a) * mp.exp(-x)

    return mp.quad(f, [0, u_ / 10, u_, 1, 10, mp.inf])


def verify(h):
    """Born and classical limits and spot points against the independent quadrature; prints, returns ok."""
    ok = True
    sqrt3_pi = mp.sqrt(3) / mp.pi
    # Born limit with its first Coulomb correction, gamma^2 = 1e-6 and 1e-4, u = 1e-2, 1, 10
    for lu in (-2.0, 0.0, 1.0):
        uu = mp.mpf(10) ** lu
        born = sqrt3_pi * mp.exp(uu / 2) * mp.besselk(0, uu / 2)
        c1 = elwert_coefficient(uu)
        for lg in (-6.0, -4.0):
            (row,) = compute_line(lu - lg, [lg], h)
            gamma = mp.sqrt(mp.mpf(10) ** lg)
            first = born + gamma * c1
            dev0, dev1 = float(row[2] / born - 1), float(row[2] / first - 1)
            # the residual after the O(gamma) term is O(gamma^2) (times a coefficient of order 10)
            good = abs(dev1) < 30 * float(gamma) ** 2 and abs(dev1) < abs(dev0)
            ok &= good
            print(
                f"Born     u=1e{lu:+.0f} gamma2=1e{lg:+.0f}: {mp.nstr(row[2], 10)}; Born {mp.nstr(born, 10)} "
                f"({dev0:+.1e}), Born + first Coulomb term {mp.nstr(first, 10)} ({dev1:+.1e}) "
                f"{'ok' if good else 'FAIL'}",
                flush=True,
            )
    # classical soft-photon limit: gamma^2 = 1e3, u = 1e-6 (w = u gamma = 3e-5)
    lg, lu = 3.0, -6.0
    (row,) = compute_line(lu - lg, [lg], h)
    u_, g2 = mp.mpf(10) ** lu, mp.mpf(10) ** lg
    oster = sqrt3_pi * (mp.log(4 / (u_ * mp.sqrt(g2))) - 2.5 * mp.euler)
    dev = float(row[2] / oster - 1)
    good = abs(dev) < 3e-3  # the classical average approaches it as ~7.5 w^(2/3) (gaunt_classical.py)
    ok &= good
    print(
        f"Oster    u=1e-6 gamma2=1e3: {mp.nstr(row[2], 10)} vs {mp.nstr(oster, 10)} ({dev:+.1e}) "
        f"{'ok' if good else 'FAIL'}"
    )
    # spot points from the independent quadrature, with h and h/2
    path = os.path.join(os.path.dirname(os.path.abspath(__file__)), "..", "tests", "data", "gaunt_sommerfeld.csv")
    with open(path) as fh:
        rows = [ln.split(",") for ln in fh.read().splitlines() if ln and not ln.startswith("#")][1:]
    picks = [r for r in rows if float(r[0]) >= 1e2][::2] + [r for r in rows if 1e-2 <= float(r[0]) < 1e2][::6]
    for r in picks:
        gamma2, u_, exact = float(r[0]), float(r[1]), float(r[2])
        lg, lw = math.log10(gamma2), math.log10(u_ / gamma2)
        (a,) = compute_line(lw, [lg], h)
        (b,) = compute_line(lw, [lg], h / 2)
        dev, conv = float(a[2] / exact - 1), float(a[2] / b[2] - 1)
        good = abs(dev) < 1e-6 and abs(conv) < 1e-6
        ok &= good
        print(
            f"spot     u={u_:.3g} gamma2={gamma2:.3g}: {mp.nstr(a[2], 10)} vs {exact:.10g} ({dev:+.1e}); "
            f"h/2 {conv:+.1e} {'ok' if good else 'FAIL'}",
            flush=True,
        )
    return ok


def header_lines(args):
    """Comment lines with the method's parameters (after the command line)."""
    return (
        f"# grid: log10 u {U_RANGE[0]:g} .. {U_RANGE[1]:g}, log10 gamma^2 {G2_RANGE[0]:g} .. {G2_RANGE[1]:g}, "
        f"step {args.step:g}; u = h nu / kT, gamma^2 = Z^2 Ry / kT; gbar = int_0^inf g(E_i = (x + u) kT, "
        "E_f = x kT) e^-x dx\n"
        f"# g: Sommerfeld (1931) in the Karzas & Latter 1961 / Hummer 1988 form (tools/gaunt_sommerfeld.py); "
        f"average along lines of fixed h nu / Z^2 Ry by the trapezoidal rule in ln(E_f / Z^2 Ry), step {args.h:g}, "
        f"nodes down to eta_f = {ETA_MAX:g} (further while cheap, at most {ETA_HARD:g}), below them "
        "continued by a straight line in E_f to the threshold; last column: bound on that piece's error\n"
    )


def random_points(args):
    """Exact values at random points of the box (uniform in log u and log gamma^2), off the grid's nodes."""
    import random

    rng = random.Random(args.seed)
    with open(args.out, "w") as fh:
        fh.write(
            f"# Thermally averaged Sommerfeld free-free Gaunt factor at random points, exact (mpmath "
            f"dps={args.dps}); generated by: python tools/gaunt_table.py --points {args.points} --seed "
            f"{args.seed} --h {args.h} --out {os.path.basename(args.out)}\n"
        )
        fh.write("log10_u,log10_gamma2,gbar,left_tail_error_bound\n")
        for _ in range(args.points):
            lu = rng.uniform(*U_RANGE)
            lg = rng.uniform(*G2_RANGE)
            (row,) = compute_line(lu - lg, [lg], args.h)
            fh.write(f"{lu:.6f},{lg:.6f},{mp.nstr(row[2], 15)},{mp.nstr(row[3], 3)}\n")
            fh.flush()
    return 0


def main(argv=None):
    """Write the table (``--out``), or print a cost estimate (``--plan``) or checks (``--verify``); the exit code."""
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--step", type=float, default=0.1, help="grid step in log10 u and log10 gamma^2")
    parser.add_argument("--h", type=float, default=0.5, help="trapezoid step in ln eps_f")
    parser.add_argument("--dps", type=int, default=gs.BASE_DPS)
    parser.add_argument("--plan", action="store_true")
    parser.add_argument("--verify", action="store_true")
    parser.add_argument("--out")
    parser.add_argument("--resume", action="store_true")
    parser.add_argument("--lines", type=float, nargs=2, metavar=("LOG_W_MIN", "LOG_W_MAX"))
    parser.add_argument("--points", type=int, help="this many random points of the (log u, log gamma^2) box")
    parser.add_argument("--seed", type=int, default=1)
    args = parser.parse_args(argv)
    gs._init_precision(args.dps)
    if args.plan:
        plan(args.step, args.h)
        return 0
    if args.verify:
        return 0 if verify(args.h) else 1
    if not args.out:
        parser.error("give --out, --plan or --verify")
    if args.points:
        return random_points(args)
    lines = grid_lines(args.step)
    done = set()
    if args.resume and os.path.exists(args.out):
        with open(args.out) as fh:
            done = {
                round(float(ln.split(",")[0]) - float(ln.split(",")[1]), 6) for ln in fh if ln and ln[0] not in "#l"
            }
    mode = "a" if args.resume and os.path.exists(args.out) else "w"
    with open(args.out, mode) as fh:
        if mode == "w":
            fh.write(
                f"# Thermally averaged Sommerfeld free-free Gaunt factor, exact (mpmath dps={args.dps}); "
                f"generated by: python tools/gaunt_table.py --step {args.step} --h {args.h} --out {args.out}"
                f"{f' --lines {args.lines[0]:g} {args.lines[1]:g}' if args.lines else ''}\n"
            )
            fh.write(header_lines(args))
            fh.write("log10_u,log10_gamma2,gbar,left_tail_error_bound\n")
        for k in sorted(lines, reverse=True):  # warm (cheap) lines first
            log_w = k * args.step
            if args.lines and not args.lines[0] - 1e-9 <= log_w <= args.lines[1] + 1e-9:
                continue
            if round(log_w, 6) in done:
                continue
            t0 = time.perf_counter()
            for lu, lg, gbar, err in compute_line(log_w, sorted(lines[k]), args.h):
                fh.write(f"{lu:.4f},{lg:.4f},{mp.nstr(gbar, 15)},{mp.nstr(err, 3)}\n")
            fh.flush()
            print(f"line log10 w = {log_w:+.2f}: {len(lines[k])} points, {time.perf_counter() - t0:.1f} s", flush=True)
    return 0


if __name__ == "__main__":
    sys.exit(main())
