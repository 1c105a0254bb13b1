"""A peer for loopbal's estimate: the same weighted-least-squares problem in CasADi, solved by IPOPT.

Run by bench/peer/run; see docs/performance.md, "Peer: a general-purpose NLP solver".

    peer.py vantle-readings --model M --periods N --seed S --out R.csv
    peer.py demo-readings --database DB --out R.csv
    peer.py compare --model M --reports J --timing T [...]

`compare` reads the model file (TOML) and loopbal's own reports (`loopbal reconcile`'s JSON):
each used meter's `measured` (the period's mean, in its uom) and `sigma` (in its uom) are the
problem's data, so both solvers solve exactly the same problem. The NLP is built once with the
meters' values and 1/σ as parameters (a meter left out, `used: false`, or with no value this
period gets weight 0, so its term vanishes, as loopbal leaves it out); each period is solved by
IPOPT with exact derivatives, warm-started from the previous period's solution (states and
multipliers, IPOPT's `warm_start_init_point`), and its optimal
objective must agree with the report's `objective` to 1e-8 (relative; absolute below 1). A
disagreement fails the run (exit 1) and names the period.

The model's semantics follow reconcile/src/equations.rs, reconcile/src/uom.rs and
docs/methods.md §1; nothing of loopbal's code is used.
"""

import argparse
import json
import math
import os
import platform
import random
import re
import sqlite3
import statistics
import subprocess
import sys
import time
import tomllib
from datetime import datetime, timedelta, timezone

# Ideal-gas molar volume, m3/kmol, at 273.15 K and 101.325 kPa: CODATA 2018 (22.413 969 54 L/mol);
# at 288.15 K (ISO 13443 reference conditions) the same scaled by 288.15 / 273.15, as
# reconcile/src/uom.rs states.
MOLAR_VOLUME_NORMAL = 22.41396954
MOLAR_VOLUME_STANDARD = MOLAR_VOLUME_NORMAL * 288.15 / 273.15

# Factor from the base unit (kmol/h, kg/h, fraction) to each uom (reconcile/src/uom.rs).
UOM_FACTOR = {
    "kmol/h": 1.0,
    "mol/s": 1000.0 / 3600.0,
    "kg/h": 1.0,
    "t/h": 1.0e-3,
    "Nm3/h": MOLAR_VOLUME_NORMAL,
    "Sm3/h": MOLAR_VOLUME_STANDARD,
    "fraction": 1.0,
    "%": 100.0,
    "ppm": 1.0e6,
}

# Denominators of fractions are floored as loopbal floors them (equations.rs, TINY_FLOW).
TINY_FLOW = 1e-12

# Objectives must agree to this, relative to max(|J|, 1).
AGREEMENT = 1e-8


class Model:
    """The model file as the peer needs it: streams, units, reactions, meters."""

    def __init__(self, path):
        with open(path, "rb") as f:
            m = tomllib.load(f)
        self.name = m["name"]
        self.components = [c["id"] for c in m["component"]]
        self.molar_mass = {c["id"]: float(c["molar_mass"]) for c in m["component"]}
        self.units = m["unit"]
        self.reactions = m.get("reaction", [])
        self.streams = []
        for s in m["stream"]:
            comps = s.get("components", self.components)
            # Kept in the model's component order, as loopbal keeps them.
            self.streams.append(
                {
                    "id": s["id"],
                    "from": s["from"],
                    "to": s["to"],
                    "components": [c for c in self.components if c in comps],
                }
            )
        self.meters = m.get("meter", [])
        self.stream_by_id = {s["id"]: s for s in self.streams}

        # The state: component flows of each stream, extents, split fractions of each
        # splitter outlet but the last (docs/methods.md §1).
        self.index = {}
        n = 0
        for s in self.streams:
            for c in s["components"]:
                self.index[("flow", s["id"], c)] = n
                n += 1
        for r in self.reactions:
            self.index[("extent", r["id"])] = n
            n += 1
        self.splits = {}
        for u in self.units:
            if u["kind"] == "splitter":
                for o in self.outlets(u["id"])[:-1]:
                    self.splits[o] = n
                    self.index[("split", o)] = n
                    n += 1
        self.n = n
        self.lower = [0.0] * n
        self.upper = [math.inf] * n
        for r in self.reactions:
            if not r.get("irreversible", False):
                self.lower[self.index[("extent", r["id"])]] = -math.inf
        for i in self.splits.values():
            self.upper[i] = 1.0

    def inlets(self, unit):
        return [s["id"] for s in self.streams if s["to"] == unit]

    def outlets(self, unit):
        return [s["id"] for s in self.streams if s["from"] == unit]

    def flow(self, stream, component):
        return self.index.get(("flow", stream, component))

    def constraints(self, z):
        """g(z): the component balance of every unit, then its splitter rows."""
        g = []
        for u in self.units:
            uid = u["id"]
            ins, outs = self.inlets(uid), self.outlets(uid)
            reactions = [r for r in self.reactions if r["unit"] == uid]
            for c in self.components:
                terms = []
                for s in ins:
                    i = self.flow(s, c)
                    if i is not None:
                        terms.append(z[i])
                for s in outs:
                    i = self.flow(s, c)
                    if i is not None:
                        terms.append(-z[i])
                for r in reactions:
                    nu = float(r["stoichiometry"].get(c, 0.0))
                    if nu != 0.0:
                        terms.append(nu * z[self.index[("extent", r["id"])]])
                if terms:
                    g.append(sum(terms[1:], terms[0]))
            if u["kind"] == "splitter":
                inlet = ins[0]
                for o in outs[:-1]:
                    phi = z[self.splits[o]]
                    for c in self.stream_by_id[inlet]["components"]:
                        g.append(z[self.flow(o, c)] - phi * z[self.flow(inlet, c)])
        return g

    def measurement(self, meter, z, fmax=max):
        """h(z) of one meter in its uom (equations.rs, `evaluate`)."""
        f = UOM_FACTOR[meter["uom"]]
        s = self.stream_by_id[meter["stream"]]
        comps = s["components"]
        flows = [(c, z[self.flow(s["id"], c)]) for c in comps]
        q = meter["quantity"]
        if q in ("molar_flow", "std_volume_flow"):
            return f * sum(n for _, n in flows)
        if q == "mass_flow":
            return f * sum(self.molar_mass[c] * n for c, n in flows)
        if q == "component_flow":
            return f * z[self.flow(s["id"], meter["component"])]
        if q == "mole_fraction":
            basis = meter.get("basis")
            total = sum(n for c, n in flows if basis is None or c in basis)
            return f * z[self.flow(s["id"], meter["component"])] / fmax(total, TINY_FLOW)
        if q == "mass_fraction":
            c = meter["component"]
            total = sum(self.molar_mass[k] * n for k, n in flows)
            return f * self.molar_mass[c] * z[self.flow(s["id"], c)] / fmax(total, TINY_FLOW)
        raise ValueError(f"meter {meter['tag']}: unknown quantity {q}")

    def sigma(self, meter, value):
        """The model's σ of a period value (docs/model.md, `[[meter]]`)."""
        if "sigma" in meter:
            return float(meter["sigma"])
        if "sigma_pct" in meter:
            return float(meter["sigma_pct"]) / 100.0 * abs(value)
        lo, hi = meter["range"]
        return float(meter["sigma_pct_span"]) / 100.0 * (hi - lo)


# ---------------------------------------------------------------------------------------------
# Generated readings of the Vantle Cross loop (tests/data/vantle-methanol.toml).

# The loop's operating conditions, from testkit/src/vantle.rs (`VantleConditions::default`):
# makeup CO, CO2, H2, CH4 (kmol/h), CO2 side feed, single-pass conversion of CO and CO2,
# the share of each component of the flash feed leaving with the crude, the share of the
# crude's CO2 flashing off in the let-down vessel (all its CH4 does), the purge fraction.
VANTLE = {
    "makeup": {"CO": 1650.0, "CO2": 720.0, "H2": 7350.0, "CH4": 280.0},
    "co2_feed": 110.0,
    "conversion": (0.42, 0.16),
    "flash_recovery": {"CO": 0.0, "CO2": 0.035, "H2": 0.0, "CH3OH": 0.965, "H2O": 0.99, "CH4": 0.006},
    "letdown_co2": 0.7,
    "purge_fraction": 0.045,
}


def vantle_state(model, scale, purge_fraction):
    """The Vantle loop's steady state with the makeup scaled by `scale`, solved directly
    (the recycle is linear in the converter feed at fixed conversions)."""
    comps = model.components
    k = VANTLE
    fresh = {c: scale * k["makeup"].get(c, 0.0) for c in comps}
    makeup = dict(fresh)
    fresh["CO2"] += scale * k["co2_feed"]
    nu = [{"CO": -1, "H2": -2, "CH3OH": 1}, {"CO2": -1, "H2": -3, "CH3OH": 1, "H2O": 1}]
    keys = ("CO", "CO2")
    # feed = fresh + (1 − p) D M feed, with out = M feed (the extents are conversion × feed of
    # the key) and D the share of the flash feed that stays in the gas.
    size = len(comps)
    ix = {c: i for i, c in enumerate(comps)}
    M = [[1.0 if i == j else 0.0 for j in range(size)] for i in range(size)]
    for r in range(2):
        for c, v in nu[r].items():
            M[ix[c]][ix[keys[r]]] += v * k["conversion"][r]
    A = [
        [
            (1.0 if i == j else 0.0)
            - (1.0 - purge_fraction) * (1.0 - k["flash_recovery"][comps[i]]) * M[i][j]
            for j in range(size)
        ]
        for i in range(size)
    ]
    feed = solve([row[:] for row in A], [fresh[c] for c in comps])
    feed = dict(zip(comps, feed))
    xi = [k["conversion"][0] * feed["CO"], k["conversion"][1] * feed["CO2"]]
    out = {c: feed[c] + sum(nu[r].get(c, 0) * xi[r] for r in range(2)) for c in comps}
    crude = {c: k["flash_recovery"][c] * out[c] for c in comps}
    gas = {c: out[c] - crude[c] for c in comps}
    purge = {c: purge_fraction * gas[c] for c in comps}
    recycle = {c: gas[c] - purge[c] for c in comps}
    letdown_gas = {"CO2": k["letdown_co2"] * crude["CO2"], "CH4": crude["CH4"]}
    product = {"CO2": crude["CO2"] - letdown_gas["CO2"], "CH3OH": crude["CH3OH"], "H2O": crude["H2O"]}
    flows = {
        "makeup": makeup,
        "co2-feed": {"CO2": scale * k["co2_feed"]},
        "fresh-gas": fresh,
        "loop-gas": feed,
        "conv-feed": feed,
        "conv-out": out,
        "interchanger-out": out,
        "flash-feed": out,
        "crude": crude,
        "flash-gas": gas,
        "purge": purge,
        "loop-return": recycle,
        "recycle": recycle,
        "letdown-gas": letdown_gas,
        "crude-product": product,
    }
    z = [0.0] * model.n
    for s in model.streams:
        for c in s["components"]:
            z[model.flow(s["id"], c)] = flows[s["id"]].get(c, 0.0)
    for r, x in zip(model.reactions, xi):
        z[model.index[("extent", r["id"])]] = x
    z[model.splits["purge"]] = purge_fraction
    g = model.constraints(z)
    worst = max(abs(v) for v in g)
    assert worst < 1e-8 * max(z), f"the generated state misses a balance by {worst}"
    return z


def solve(a, b):
    """Gaussian elimination with partial pivoting (a small dense system)."""
    n = len(b)
    for k in range(n):
        p = max(range(k, n), key=lambda i: abs(a[i][k]))
        a[k], a[p], b[k], b[p] = a[p], a[k], b[p], b[k]
        for i in range(k + 1, n):
            f = a[i][k] / a[k][k]
            for j in range(k, n):
                a[i][j] -= f * a[k][j]
            b[i] -= f * b[k]
    x = [0.0] * n
    for i in reversed(range(n)):
        x[i] = (b[i] - sum(a[i][j] * x[j] for j in range(i + 1, n))) / a[i][i]
    return x


def vantle_readings(args):
    """Hourly readings of every meter: the loop's true state, which moves slowly from hour to
    hour (makeup ±4 % over a day, purge fraction 0.045 ± 0.004 over a week), plus Gaussian
    noise at each meter's σ from a fixed seed. One reading per meter and hour, so the period's
    value has the meter's σ. Generated data, not plant data."""
    model = Model(args.model)
    if model.name != "vantle-vc3":
        sys.exit(f"{args.model}: the generator knows only the Vantle loop (vantle-vc3)")
    rng = random.Random(args.seed)
    start = datetime(2026, 1, 5, tzinfo=timezone.utc)
    with open(args.out, "w") as out:
        out.write("tag,time,value\n")
        for h in range(args.periods):
            scale = 1.0 + 0.04 * math.sin(2 * math.pi * h / 24.0)
            purge = VANTLE["purge_fraction"] + 0.004 * math.sin(2 * math.pi * h / 168.0)
            z = vantle_state(model, scale, purge)
            t = (start + timedelta(hours=h, minutes=30)).strftime("%Y-%m-%dT%H:%M:%SZ")
            for m in model.meters:
                exact = model.measurement(m, z)
                value = exact + model.sigma(m, exact) * rng.gauss(0.0, 1.0)
                out.write(f"{m['tag']},{t},{value!r}\n")


def demo_readings(args):
    """The readings `loopbal demo --database DB` simulated and stored, as a readings CSV."""
    con = sqlite3.connect(f"file:{args.database}?mode=ro", uri=True)
    rows = con.execute("SELECT tag, time, value, quality FROM readings ORDER BY time, tag").fetchall()
    con.close()
    with open(args.out, "w") as out:
        out.write("tag,time,value,quality\n")
        for tag, ms, value, quality in rows:
            t = datetime.fromtimestamp(ms / 1000.0, tz=timezone.utc)
            out.write(f"{tag},{t.strftime('%Y-%m-%dT%H:%M:%S.%f')[:-3]}Z,{value!r},{quality}\n")
    print(f"{len(rows)} readings", file=sys.stderr)


# ---------------------------------------------------------------------------------------------
# The comparison.


def build(model, ca):
    """The NLP, once: states x, parameters (y, 1/σ) of every meter."""
    m = len(model.meters)
    x = ca.SX.sym("x", model.n)
    y = ca.SX.sym("y", m)
    w = ca.SX.sym("w", m)
    z = [x[i] for i in range(model.n)]
    f = 0
    for k, meter in enumerate(model.meters):
        h = model.measurement(meter, z, fmax=ca.fmax)
        f += ((y[k] - h) * w[k]) ** 2
    g = ca.vertcat(*model.constraints(z))
    return {"x": x, "p": ca.vertcat(y, w), "f": f, "g": g}, g.shape[0]


def period_data(model, report):
    """(y, 1/σ) of every model meter from a report: weight 0 for a meter left out or unmeasured."""
    by_tag = {m["tag"]: m for m in report["meters"]}
    y, w = [], []
    for meter in model.meters:
        r = by_tag.get(meter["tag"])
        used = (
            r is not None
            and r.get("used", True)
            and r.get("measured") is not None
            and r.get("sigma") is not None
            and r["sigma"] > 0
        )
        y.append(r["measured"] if used else 0.0)
        w.append(1.0 / r["sigma"] if used else 0.0)
    return y, w


def quantiles(values):
    v = sorted(values)
    if not v:
        return float("nan"), float("nan")
    p90 = v[min(len(v) - 1, math.ceil(0.9 * len(v)) - 1)]
    return statistics.median(v), p90


def ipopt_version():
    """IPOPT's banner line, from a tiny solve in a child process (print_level 5)."""
    code = (
        "import casadi as ca\n"
        "x = ca.SX.sym('x')\n"
        "ca.nlpsol('s', 'ipopt', {'x': x, 'f': (x - 1) ** 2}, {'ipopt.print_level': 5})(x0=0)\n"
    )
    out = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True).stdout
    found = re.search(r"This is Ipopt version (\S+), running with linear solver (.+?)\.\n", out)
    return f"{found.group(1)} (linear solver {found.group(2)})" if found else "unknown"


def cpu_model():
    try:
        with open("/proc/cpuinfo") as f:
            for line in f:
                if line.startswith("model name"):
                    return line.split(":", 1)[1].strip()
    except OSError:
        pass
    return platform.processor() or "unknown"


def loopbal_timings(path):
    """Per-period engine seconds from `loopbal reconcile --timing`'s standard error."""
    seconds = {}
    with open(path) as f:
        for line in f:
            found = re.match(r"timing: (\S+) (\S+) s$", line.strip())
            if found:
                seconds[found.group(1)] = float(found.group(2))
    return seconds


def compare(args):
    import casadi as ca

    model = Model(args.model)
    with open(args.reports) as f:
        reports = json.load(f)
    loopbal_seconds = loopbal_timings(args.timing)

    built = time.perf_counter()
    nlp, rows = build(model, ca)
    options = {
        "print_time": False,
        "ipopt.print_level": 0,
        "ipopt.sb": "yes",
        "ipopt.tol": args.tol,
        "ipopt.hessian_approximation": "exact",
        # The objective is already scaled by each meter's σ; without IPOPT's own gradient
        # scaling its tol applies to J itself (with it, a cold start from a point of steep
        # gradients ended 1e-8 above the optimum with flows resting on their bounds).
        "ipopt.nlp_scaling_method": "none",
    }
    for extra in args.ipopt or []:
        key, value = extra.split("=", 1)
        try:
            value = float(value) if "." in value or "e" in value else int(value)
        except ValueError:
            pass
        options["ipopt." + key] = value
    if not args.primal_start_only:
        # IPOPT's warm start: the previous period's multipliers too, and a small barrier
        # parameter and bound push so that the start is not pushed back into the interior.
        options.update(
            {
                "ipopt.warm_start_init_point": "yes",
                "ipopt.warm_start_bound_push": 1e-9,
                "ipopt.warm_start_mult_bound_push": 1e-9,
                "ipopt.mu_init": 1e-6,
            }
        )
    solver = ca.nlpsol("peer", "ipopt", nlp, options)
    # The first period, and any period the warm start fails on, is solved from a cold start.
    cold_options = {k: v for k, v in options.items() if "warm" not in k and "mu_init" not in k}
    cold = ca.nlpsol("peer_cold", "ipopt", nlp, cold_options)
    build_seconds = time.perf_counter() - built
    lbx = ca.DM([-ca.inf if math.isinf(v) else v for v in model.lower])
    ubx = ca.DM([ca.inf if math.isinf(v) else v for v in model.upper])

    # First start: a neutral point (every flow 100 kmol/h, extents 0, split fractions 0.5);
    # after that, the previous period's solution.
    x0 = [0.0] * model.n
    for key, i in model.index.items():
        x0[i] = {"flow": 100.0, "extent": 0.0, "split": 0.5}[key[0]]
    x0, lam_x0, lam_g0 = ca.DM(x0), ca.DM.zeros(model.n), ca.DM.zeros(rows)

    peer_seconds, ipopt_seconds, iterations, paired = [], [], [], []
    compared = skipped_no_data = skipped_failed = cold_retries = 0
    mismatches, worst = [], (0.0, None)
    for report in reports:
        period = report["period_start"]
        if report["status"] == "no_data" or report.get("objective") is None:
            skipped_no_data += 1
            continue
        if report["status"] not in ("solved", "unobservable"):
            # loopbal's own run fails on these (exit 1); there is no optimum to compare.
            skipped_failed += 1
            print(f"note: period {period}: loopbal's status is {report['status']}; not compared")
            continue
        y, w = period_data(model, report)
        p = ca.DM(y + w)
        expected = float(report["objective"])
        began = time.perf_counter()
        first = solver if compared > 0 else cold
        sol = first(x0=x0, lam_x0=lam_x0, lam_g0=lam_g0, p=p, lbx=lbx, ubx=ubx, lbg=0, ubg=0)
        stats = first.stats()
        if not stats["success"] and first is solver:
            sol = cold(x0=x0, p=p, lbx=lbx, ubx=ubx, lbg=0, ubg=0)
            stats = cold.stats()
            cold_retries += 1
        elapsed = time.perf_counter() - began
        objective = float(sol["f"])
        diff = abs(objective - expected) / max(abs(expected), 1.0)
        compared += 1
        if diff > worst[0]:
            worst = (diff, period)
        if not stats["success"] or diff > AGREEMENT:
            mismatches.append(
                f"period {period}: IPOPT {stats['return_status']}, objective {objective!r}, "
                f"loopbal's {expected!r} (difference {diff:.3g} relative to max(|J|, 1); "
                + ("IPOPT found a lower J: loopbal's estimate is not the minimum)" if objective < expected
                   else "IPOPT's J is higher: the peer stopped short or found another minimum)")
            )
        peer_seconds.append(elapsed)
        # CasADi's evaluations of f, g and their derivatives within the solve.
        ipopt_seconds.append(sum(v for k, v in stats.items() if k.startswith("t_wall_nlp_")))
        iterations.append(stats["iter_count"])
        if period in loopbal_seconds:
            paired.append(elapsed / loopbal_seconds[period])
        # Warm start from this solution; a failed solve restarts the next from the last good one.
        if stats["success"]:
            x0, lam_x0, lam_g0 = sol["x"], sol["lam_x"], sol["lam_g"]

    lb = [loopbal_seconds[r["period_start"]] for r in reports if r["period_start"] in loopbal_seconds]
    lb_med, lb_p90 = quantiles(lb)
    peer_med, peer_p90 = quantiles(peer_seconds)
    ip_med, ip_p90 = quantiles(ipopt_seconds)
    it_med, it_p90 = quantiles(iterations)
    pair_med, _ = quantiles(paired)
    meters = len(model.meters)
    print(f"== {model.name}: {args.model}")
    print(
        f"problem: {model.n} states, {rows} equality rows, {meters} meters; "
        f"{len(reports)} periods in loopbal's reports, {compared} compared, "
        f"{skipped_no_data} without data skipped, {skipped_failed} not reconciled by loopbal skipped"
    )
    print(
        f"objectives: worst difference {worst[0]:.3g} (relative to max(|J|, 1)) in period {worst[1]}; "
        f"tolerance {AGREEMENT:g}"
    )
    ms = 1e3
    print(
        f"loopbal, whole analysis per period (--timing): median {lb_med * ms:.3f} ms, "
        f"p90 {lb_p90 * ms:.3f} ms, mean {statistics.fmean(lb) * ms:.3f} ms"
    )
    if args.wall is not None and args.startup_wall is not None and lb:
        per = (args.wall - args.startup_wall) / max(len(lb) - 1, 1)
        print(
            f"loopbal, process wall per period: ({args.wall:.3f} s for {len(lb)} periods − "
            f"{args.startup_wall:.3f} s for a 1-period file) / {len(lb) - 1} = {per * ms:.3f} ms "
            f"(reading, JSON printing included)"
        )
    print(
        f"peer, IPOPT solve per period (solver call, after a one-time build of {build_seconds:.3f} s): "
        f"median {peer_med * ms:.3f} ms, p90 {peer_p90 * ms:.3f} ms, "
        f"mean {statistics.fmean(peer_seconds) * ms:.3f} ms, of which CasADi's "
        f"evaluations of f, g and derivatives median {ip_med * ms:.3f} ms; IPOPT iterations "
        f"median {it_med:g}, p90 {it_p90:g}; {cold_retries} warm start(s) failed and solved again cold"
    )
    ratio = peer_med / lb_med if lb_med > 0 else float("nan")
    print(
        f"ratio peer/loopbal: {ratio:.2f} (of medians); median of per-period ratios {pair_med:.2f}"
    )
    summary = {
        "model": model.name,
        "states": model.n,
        "rows": rows,
        "meters": meters,
        "periods": len(reports),
        "compared": compared,
        "worst_difference": worst[0],
        "loopbal_median_s": lb_med,
        "loopbal_p90_s": lb_p90,
        "peer_median_s": peer_med,
        "peer_p90_s": peer_p90,
        "evaluations_median_s": ip_med,
        "iterations_median": it_med,
        "ratio": ratio,
    }
    if args.summary:
        with open(args.summary, "w") as f:
            json.dump(summary, f, indent=1)
    sys.stdout.flush()
    if mismatches:
        for line in mismatches[:50]:
            print(f"MISMATCH {line}", file=sys.stderr)
        print(f"{len(mismatches)} period(s) disagree with loopbal", file=sys.stderr)
        return 1
    return 0


def machine(args):
    import casadi as ca

    print(f"machine: {cpu_model()}, {os.cpu_count()} logical cores; {platform.platform()}")
    print(f"python {platform.python_version()}, casadi {ca.__version__}, IPOPT {ipopt_version()}")


def main():
    p = argparse.ArgumentParser(description=__doc__.split("\n")[0])
    sub = p.add_subparsers(dest="command", required=True)
    g = sub.add_parser("vantle-readings")
    g.add_argument("--model", required=True)
    g.add_argument("--periods", type=int, default=500)
    g.add_argument("--seed", type=int, default=1)
    g.add_argument("--out", required=True)
    d = sub.add_parser("demo-readings")
    d.add_argument("--database", required=True)
    d.add_argument("--out", required=True)
    c = sub.add_parser("compare")
    c.add_argument("--model", required=True)
    c.add_argument("--reports", required=True)
    c.add_argument("--timing", required=True, help="loopbal reconcile --timing's standard error")
    c.add_argument("--wall", type=float, help="loopbal reconcile's wall seconds on the reports' file")
    c.add_argument("--startup-wall", type=float, help="the same on a 1-period file")
    c.add_argument("--tol", type=float, default=1e-10, help="IPOPT's tol")
    c.add_argument(
        "--primal-start-only",
        action="store_true",
        help="warm-start from the previous states alone, not IPOPT's warm_start_init_point",
    )
    c.add_argument("--ipopt", action="append", help="another IPOPT option, NAME=VALUE")
    c.add_argument("--summary", help="write the figures as JSON here")
    sub.add_parser("machine")
    args = p.parse_args()
    if args.command == "vantle-readings":
        vantle_readings(args)
    elif args.command == "demo-readings":
        demo_readings(args)
    elif args.command == "machine":
        machine(args)
    else:
        sys.exit(compare(args))


if __name__ == "__main__":
    main()
