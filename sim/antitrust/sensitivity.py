"""Sensitivity: the comparison repeated over ranges of the uncertain inputs, locating where the conclusion flips.

The inputs are the calibration's (a margin, an elasticity, the market elasticity, the potential market of a logit
calibration), the discount factor and the monitoring noise (a scale of every noise parameter). With the observed
shares held fixed, a logit or linear-Cournot calibration's margin or elasticity only rescales every markup and
profit, so the thresholds do not depend on it; the output says so when the curves are flat.
"""

from __future__ import annotations

import math

import numpy as np

from sim.antitrust.calibration import calibrate
from sim.antitrust.compare import category, compare, finite_or_none, flips, rank, sustains
from sim.antitrust.merger import difference, merge
from sim.antitrust.options import SCHEME_NAMES, SENSITIVITY_INPUTS, observed_input
from sim.antitrust.sides import scheme_threshold, simulate_side
from sim.core.errors import InputError, SolverError
from sim.simulation.engine import prepare_game
from sim.theory.thresholds import partial_collusion

__all__ = ["robustness", "sensitivity"]


def _flat(ts, tol: float = 1e-6) -> bool:
    r = [rank(t) for t in ts]
    if all(math.isinf(x) for x in r):
        return True
    if any(math.isinf(x) for x in r):
        return False
    return max(r) - min(r) <= tol


def _signed_change(before: float, after: float) -> float:
    """After minus before, with 'not sustainable' as +1 beyond one: for locating flips."""
    b = before if math.isfinite(rank(before)) else 2.0
    a = after if math.isfinite(rank(after)) else 2.0
    return difference(a, b)


def _category_flips(xs, pre_t, post_t, ok, delta) -> list:
    """Input values between which the category at the headline delta changes."""
    cats = [category(sustains(b, delta), sustains(a, delta)) if k else None for b, a, k in zip(pre_t, post_t, ok)]
    out = []
    for k in range(len(xs) - 1):
        if cats[k] is not None and cats[k + 1] is not None and cats[k] != cats[k + 1]:
            out.append({"between": [float(xs[k]), float(xs[k + 1])], "from": cats[k], "to": cats[k + 1]})
    return out


def _calibration_input(data, merger, name: str, xs, opts: dict, delta: float, step) -> dict:
    pre_t, post_t, status = [], [], []
    binding_pre, binding_post = [], []
    for x in xs:
        try:
            cal = calibrate(data.with_input(name, float(x)))
            mr = merge(cal.market, merger)
            tb = scheme_threshold(cal.market, opts)
            ta = scheme_threshold(mr.post, opts)
            pre_t.append(tb[0])
            post_t.append(ta[0])
            binding_pre.append(mr.names_pre[tb[1]])
            binding_post.append(mr.names_post[ta[1]])
            status.append("ok")
        except (InputError, SolverError) as exc:
            pre_t.append(math.nan)
            post_t.append(math.nan)
            binding_pre.append(None)
            binding_post.append(None)
            status.append(f"infeasible: {exc}")
        step(f"sensitivity {name} {x:g}")
    ok = np.array([s == "ok" for s in status])
    change = np.array([_signed_change(b, a) if k else math.nan for b, a, k in zip(pre_t, post_t, ok)])
    out = {
        "values": np.asarray(xs).tolist(), "observed": observed_input(data, name),
        "threshold_before": [finite_or_none(v) for v in pre_t],
        "threshold_after": [finite_or_none(v) for v in post_t], "binding_before": binding_pre,
        "binding_after": binding_post, "status": status,
        "direction": [compare(b, a) if k else None for b, a, k in zip(pre_t, post_t, ok)],
        "flips": flips(np.asarray(xs), change),
        "category_at_delta": [category(sustains(b, delta), sustains(a, delta)) if k else None
                              for b, a, k in zip(pre_t, post_t, ok)],
        "category_flips": _category_flips(np.asarray(xs), pre_t, post_t, ok, delta),
    }
    fin = [t for t in pre_t + post_t if math.isfinite(rank(t))]
    if ok.all() and fin and _flat(pre_t) and _flat(post_t):
        out["note"] = (f"the thresholds do not depend on {name} here: with the observed shares held fixed, "
                       f"{name} only rescales every price-cost markup and profit by a common factor, which "
                       "leaves every ratio of profits, and so every critical discount factor, unchanged")
    return out


def _along_delta(ds, before, after, opts: dict, step) -> dict:
    sch = opts["scheme"] if opts["scheme"] != "stick_carrot" else "grim"
    gains = {"before": [], "after": []}
    for d in ds:
        for side in (before, after):
            p = partial_collusion(side.market, float(d), sch, T=opts["length"] if sch == "finite" else None,
                                  stage=side.report.stage)
            gains[side.label].append(p.profit_gain)
        step(f"sensitivity delta {d:g}")
    hb, ha = before.headline(opts).market, after.headline(opts).market
    out = {
        "values": np.asarray(ds).tolist(), "scheme": SCHEME_NAMES[sch] + (f", T={opts['length']}"
                                                                          if sch == "finite" else ""),
        "profit_gain_before": gains["before"], "profit_gain_after": gains["after"],
        "category": [category(sustains(hb, d), sustains(ha, d)) for d in ds],
        "threshold_before": finite_or_none(hb), "threshold_after": finite_or_none(ha),
        "flips": sorted({float(t) for t in (hb, ha) if math.isfinite(rank(t)) and ds[0] <= t <= ds[-1]}),
    }
    if sch != opts["scheme"]:
        out["note"] = "partial collusion shown for grim trigger (stick and carrot is too slow to sweep)"
    return out


def _along_noise(ks, noise_mons: list, games: tuple, runs: dict, key, threads, step) -> dict:
    res = {"before": [], "after": []}
    for j, k in enumerate(ks):
        for i, (label, market, entries, agreement) in enumerate(games):
            g = prepare_game(market, entries, noise_mons[j], agreement, strict=False)
            e = simulate_side(g, runs, key=tuple(key) + (3, j, i), threads=threads).metrics["collusive_share"]
            res[label].append(e)
        step(f"sensitivity noise x{k:g}")
    diff = np.array([difference(a.value, b.value) for a, b in zip(res["after"], res["before"])])
    return {
        "scales": np.asarray(ks).tolist(),
        "monitoring": [m.to_dict() for m in noise_mons],
        "collusive_share_before": [e.value for e in res["before"]],
        "collusive_share_before_ci": [[e.low, e.high] for e in res["before"]],
        "collusive_share_after": [e.value for e in res["after"]],
        "collusive_share_after_ci": [[e.low, e.high] for e in res["after"]],
        "difference": diff.tolist(), "flips": flips(np.asarray(ks), diff),
    }


def sensitivity(p, before, after, step, key=(0,), threads=None) -> dict:
    """The comparison over every sensitivity range of a prepared assessment.

    Parameters
    ----------
    p : PreparedAssessment
        The validated assessment (:func:`sim.antitrust.assess.prepare_assessment`).
    before, after : Side
        The two sides.
    step : callable
        ``step(what)``, called after each point (progress).
    key : tuple of int
        Prefix of the stream keys: noise point ``j`` (from 0) draws from ``key + (3, j, 0)`` before and
        ``key + (3, j, 1)`` after the merger.
    threads : int, optional
        Threads of the simulations (the numbers do not depend on it).

    Returns
    -------
    dict
        Name -> the range's values and results, with its axis settings (``labels``, ``log``).
    """
    sens, opts, delta = p.sens, p.opts, p.effective_delta
    out = {}
    for name in SENSITIVITY_INPUTS:
        if name in sens:
            out[name] = _calibration_input(p.data, p.merger, name, sens[name], opts, delta, step)
    if "delta" in sens:
        out["delta"] = _along_delta(sens["delta"], before, after, opts, step)
    if "noise" in sens and opts["simulate"]:
        games = (("before", before.market, p.entries, opts["agreement"]),
                 ("after", after.market, p.post_entries, opts["agreement"]))
        out["noise"] = _along_noise(sens["noise"], p.noise_monitoring, games, p.runs, key, threads, step)
    for name, s in out.items():
        s.update(p.settings["sensitivity_axes"][name])
    return out


def _input_robustness(name: str, s: dict, conclusion: dict) -> str:
    dirs = [d for d in s["direction"] if d is not None]
    xs = s["values"]
    same = all(d == conclusion["direction"] for d in dirs) and bool(dirs)
    if not dirs:
        text = f"no value of {name} in [{xs[0]:g}, {xs[-1]:g}] gave a valid calibration"
    elif same and not s["flips"]:
        text = (f"the merger's effect on the threshold ({conclusion['direction']}) holds over the whole range of "
                f"{name}, [{xs[0]:g}, {xs[-1]:g}]")
    else:
        where = ", ".join(f"{x:.4g}" for x in s["flips"]) or "between grid points"
        text = (f"the merger's effect on the threshold changes sign over {name} in [{xs[0]:g}, {xs[-1]:g}], "
                f"at {where}")
    if s["category_flips"]:
        text += "; at the discount factor {:.4g} the conclusion changes ".format(conclusion["delta"]) + "; ".join(
            f"from '{c['from']}' to '{c['to']}' between {c['between'][0]:.4g} and {c['between'][1]:.4g}"
            for c in s["category_flips"])
    infeasible = sum(1 for st in s["status"] if st != "ok")
    if infeasible:
        text += f" ({infeasible} of {len(xs)} values gave no valid calibration)"
    return text


def robustness(sens: dict, conclusion: dict) -> dict:
    """Whether the conclusion holds over each sensitivity range, in words.

    Parameters
    ----------
    sens : dict
        The output of :func:`sensitivity`.
    conclusion : dict
        The headline comparison (:func:`sim.antitrust.conclusion.conclusion`).

    Returns
    -------
    dict
        Name of the range -> one sentence.
    """
    out = {}
    for name in SENSITIVITY_INPUTS:
        if name in sens:
            out[name] = _input_robustness(name, sens[name], conclusion)
    if "delta" in sens:
        fl = sens["delta"]["flips"]
        out["delta"] = ("the conclusion at a given discount factor changes at " + ", ".join(f"{x:.4g}" for x in fl)
                        if fl else "no threshold lies within the range of discount factors examined")
    if "noise" in sens:
        fl = sens["noise"]["flips"]
        out["noise"] = ("the ordering of simulated persistence (after minus before) changes sign at noise scale "
                        + ", ".join(f"{x:.4g}" for x in fl) if fl else
                        "the ordering of simulated persistence does not change over the noise range examined")
    return out
