"""Tables (CSV), JSON and figures of a tournament and its evolutionary analysis.

Tables (:func:`write_tables`), one row per item, plain numbers (empty cells for undefined values):

* ``scores.csv`` -- per entrant: rank, profit gain, discounted profit and mean profit with standard
  errors and intervals, and the bootstrap rank stability;
* ``matches.csv`` -- per match and seat: the entrant, the firm's estimates and how to reproduce it;
* ``groups.csv`` -- per group (multiset of entrants) and member: the payoffs used for the scores and
  the evolutionary dynamics;
* ``pairwise.csv`` -- two seats: each entrant's payoff against each other, the paired difference and
  who beats whom; ``versus.csv`` -- more seats: each entrant's payoff when every rival is one other;
* ``rank_above.csv`` -- share of bootstrap resamples in which the row entrant ranks above the column;
* ``replicator.csv``, ``fixation.csv``, ``stability.csv`` -- the evolutionary analysis;
* ``tournament.json`` -- everything, with the caution; ``summary.txt`` -- the readable report.

Figures (:func:`tournament_figures`, matplotlib imported lazily with the Agg backend): the score
heatmap, the ranking with intervals, the replicator trajectories and the fixation probabilities.
"""

from __future__ import annotations

import csv
import math
from pathlib import Path

import numpy as np

# one check-and-create of output folders for the simulation and tournament figures and tables
from ._simplots import _outdir as output_dir
from ._simplots import _pyplot

__all__ = ["output_dir", "tournament_figures", "tournament_json", "write_tables"]

_METRICS = ("profit_gain", "discounted_profit", "profit")


def _cell(x):
    if x is None:
        return ""
    if isinstance(x, bool | np.bool_):
        return "true" if x else "false"
    if isinstance(x, int | np.integer):
        return str(int(x))
    if isinstance(x, float | np.floating):
        v = float(x)
        return "" if not math.isfinite(v) else repr(v)
    return str(x)


def _write(path: Path, headers, rows) -> Path:
    with open(path, "w", newline="", encoding="utf-8") as f:
        w = csv.writer(f, lineterminator="\n")
        w.writerow(headers)
        for r in rows:
            w.writerow([_cell(x) for x in r])
    return path


def tournament_json(result, evolution=None) -> dict:
    out = result.to_dict()
    if evolution is not None:
        out["evolution"] = evolution.to_dict()
    return out


def write_tables(result, directory, evolution=None, summary: str | None = None, key: str = "--out") -> list[Path]:
    """Write the CSV tables, ``tournament.json`` and (when given) ``summary.txt``; returns the paths."""
    from ._jsonutil import dumps

    d = output_dir(directory, key)
    labels = result.labels
    plan = result.plan
    files = []
    st = result.stability
    head = ["rank", "entrant", "strategy"]
    for m in _METRICS:
        head += [m, f"{m}_se", f"{m}_low", f"{m}_high"]
    head += ["rank_share", "rank_low", "rank_high", "top_share", "score_low_bootstrap", "score_high_bootstrap"]
    rows = []
    for e in result.order:
        r = [int(result.ranks[e]), labels[e], plan.entrants[e].name]
        for m in _METRICS:
            x = result.scores[m][e]
            r += [x.value, x.se, x.low, x.high]
        if st:
            p = st["per_entrant"]
            r += [p["rank_share"][e], p["rank_low"][e], p["rank_high"][e], p["top_share"][e], p["score_low"][e],
                  p["score_high"][e]]
        else:
            r += [None] * 6
        rows.append(r)
    files.append(_write(d / "scores.csv", head, rows))

    head = ["match", "group", "kind", "seat", "entrant", "replications"]
    for m in _METRICS:
        head += [m, f"{m}_se"]
    head += ["collusive_share", "converged", "seed", "stream"]
    rows = []
    for rec in result.matches:
        s = rec.stream
        stream = "key " + " ".join(map(str, s["key"])) if "key" in s else f"cell {s['cell']}"
        for seat, e in enumerate(rec.lineup):
            r = [rec.index + 1, rec.group + 1, "learning" if rec.learning else "automata", seat + 1, labels[e],
                 rec.n_reps]
            for m in _METRICS:
                est = rec.metric(m)[seat]
                r += [est.value, est.se]
            r += [rec.collusive_share.value if rec.collusive_share is not None else None, rec.converged, s["seed"],
                  stream]
            rows.append(r)
    files.append(_write(d / "matches.csv", head, rows))

    head = ["group", "members", "entrant"]
    for m in _METRICS:
        head += [m, f"{m}_se"]
    rows = []
    for g, grp in enumerate(plan.groups):
        members = " + ".join(labels[e] for e in grp)
        for e in sorted(set(grp)):
            r = [g + 1, members, labels[e]]
            for m in _METRICS:
                v, s = result.group_payoffs[m]
                r += [v[g, e], s[g, e]]
            rows.append(r)
    files.append(_write(d / "groups.csv", head, rows))

    score = result.score
    E = len(labels)
    if result.pairwise is not None:
        pw = result.pairwise[score]
        conf = plan.settings["confidence"]
        z = _z(conf)
        rows = []
        for i in range(E):
            for j in range(E):
                verdict = {1: "beats", -1: "beaten", 0: "neither"}[int(pw["beats"][i, j])] if i != j else ""
                rows.append([labels[i], labels[j], pw["value"][i, j], pw["se"][i, j],
                             pw["value"][i, j] - z * pw["se"][i, j], pw["value"][i, j] + z * pw["se"][i, j],
                             pw["difference"][i, j], pw["difference_se"][i, j], verdict])
        files.append(_write(d / "pairwise.csv", ["entrant", "opponent", score, "se", "low", "high", "difference",
                                                  "difference_se", "verdict"], rows))
    else:
        rows = [[labels[i], labels[j], *(result.versus[m][i, j] for m in _METRICS)]
                for i in range(E) for j in range(E)]
        files.append(_write(d / "versus.csv", ["entrant", "every_rival", *_METRICS], rows))
    if st:
        A = np.asarray(st["above"])
        files.append(_write(d / "rank_above.csv", ["entrant", *labels],
                            [[labels[i], *A[i].tolist()] for i in range(E)]))

    if evolution is not None:
        rp = evolution.replicator
        rows = [[t, *rp.shares[t].tolist(), rp.mean_payoff[t]] for t in range(rp.shares.shape[0])]
        files.append(_write(d / "replicator.csv", ["generation", *labels, "mean_payoff"], rows))
        N = evolution.settings["population"]
        sim = evolution.simulated_share()
        rows = []
        for i in range(E):
            for j in range(E):
                if i == j:
                    continue
                rows.append([labels[i], labels[j], evolution.fixation[i, j], evolution.fixation[i, j] * N,
                             int(evolution.simulated[i, j]) if evolution.simulated is not None else None,
                             sim[i, j] if sim is not None else None, evolution.runs])
        files.append(_write(d / "fixation.csv", ["invader", "resident", "rho", "rho_times_n", "simulated_fixations",
                                                  "simulated_rho", "runs"], rows))
        s = evolution.stability
        rows = [[labels[e], s["ess"][e], s["neutral"][e], s["ess_n"][e], "; ".join(s["invaded_by"][e]),
                 "; ".join(s["ess_n_failures"][e]), rp.final[e], evolution.stationary[e]] for e in range(E)]
        files.append(_write(d / "stability.csv", ["entrant", "ess", "neutrally_stable", "ess_n", "invaded_by",
                                                   "ess_n_fails_against", "replicator_final_share",
                                                   "rare_mutation_share"], rows))
    p = d / "tournament.json"
    p.write_text(dumps(tournament_json(result, evolution), indent=2) + "\n", encoding="utf-8")
    files.append(p)
    if summary is not None:
        p = d / "summary.txt"
        p.write_text(summary if summary.endswith("\n") else summary + "\n", encoding="utf-8")
        files.append(p)
    return files


def _z(confidence: float) -> float:
    from .metrics import _z as z

    return z(confidence)


# --------------------------------------------------------------------------------------------------
# Figures
# --------------------------------------------------------------------------------------------------


def tournament_figures(result, directory, evolution=None, key: str = "--plot") -> list[Path]:
    """Write ``score_heatmap.png``, ``ranking.png`` and, with the evolutionary analysis,
    ``replicator.png`` and ``fixation.png``; returns the paths."""
    d = output_dir(directory, key)
    plt = _pyplot()
    labels = result.labels
    E = len(labels)
    score = result.score
    from .tournament import SCORE_NAMES

    name = SCORE_NAMES[score]
    files = []
    size = max(4.0, 0.55 * E + 2.0)

    # 1. score heatmap: row's payoff when every rival is the column
    V = result.versus[score]
    fig, ax = plt.subplots(figsize=(size + 1.0, size))
    im = ax.imshow(V, cmap="viridis")
    ax.set_xticks(range(E), labels, rotation=45, ha="right", fontsize=8)
    ax.set_yticks(range(E), labels, fontsize=8)
    if E <= 14:
        lo, hi = np.nanmin(V), np.nanmax(V)
        mid = 0.5 * (lo + hi)
        for i in range(E):
            for j in range(E):
                ax.text(j, i, f"{V[i, j]:.3g}", ha="center", va="center", fontsize=7,
                        color="white" if V[i, j] < mid else "black")
        if result.pairwise is not None:
            B = result.pairwise[score]["beats"]
            for i in range(E):
                for j in range(E):
                    if B[i, j] > 0:
                        ax.add_patch(plt.Rectangle((j - 0.5, i - 0.5), 1, 1, fill=False, ec="C3", lw=1.5))
    ax.set_xlabel("rivals (every rival plays this entrant)" if result.plan.seats > 2 else "opponent")
    ax.set_ylabel("entrant")
    title = f"{name.capitalize()} of the row entrant"
    if result.pairwise is not None:
        title += "\n(red frame: beats the opponent in their match)"
    ax.set_title(title, fontsize=10)
    fig.colorbar(im, ax=ax, shrink=0.8, label=name)
    fig.tight_layout()
    files.append(d / "score_heatmap.png")
    fig.savefig(files[-1], dpi=120)
    plt.close(fig)

    # 2. ranking with intervals
    order = result.order
    est = [result.scores[score][e] for e in order]
    fig, ax = plt.subplots(figsize=(7, max(3.0, 0.4 * E + 1.2)))
    y = np.arange(E)[::-1]
    vals = np.array([x.value for x in est])
    lo = np.array([x.low for x in est])
    hi = np.array([x.high for x in est])
    ax.errorbar(vals, y, xerr=[np.nan_to_num(vals - lo), np.nan_to_num(hi - vals)], fmt="o", color="C0", capsize=3,
                label=f"{100 * result.plan.settings['confidence']:g}% interval")
    st = result.stability
    ticks = []
    for e in order:
        t = f"{int(result.ranks[e])}. {labels[e]}"
        if st:
            t += f"  ({100 * st['per_entrant']['rank_share'][e]:.0f}% keep rank)"
        ticks.append(t)
    ax.set_yticks(y, ticks, fontsize=8)
    ax.set_xlabel(name)
    ttl = f"Ranking by {name}"
    if st:
        ttl += f"; whole ranking holds in {100 * st['ranking_holds']:.0f}% of {st['resamples']} resamples"
    ax.set_title(ttl, fontsize=9)
    ax.grid(axis="x", alpha=0.3)
    fig.tight_layout()
    files.append(d / "ranking.png")
    fig.savefig(files[-1], dpi=120)
    plt.close(fig)

    if evolution is None:
        return files

    # 3. replicator trajectories
    rp = evolution.replicator
    fig, ax = plt.subplots(figsize=(8, 4))
    t = np.arange(rp.shares.shape[0])
    for e in range(E):
        ax.plot(t, rp.shares[:, e], lw=1.2, label=labels[e], color=f"C{e % 10}",
                ls="-" if e < 10 else "--")
    ax.set_ylim(-0.02, 1.02)
    ax.set_xlabel("generation")
    ax.set_ylabel("population share")
    s = evolution.settings
    fmap = "1 - w + w payoff" if s["fitness"] == "linear" else "exp(w payoff)"
    ax.set_title(f"Replicator dynamics on the {name} (fitness {fmap}, w = {s['selection']:g})", fontsize=9)
    ax.legend(fontsize=7, ncol=2 if E > 6 else 1, loc="best")
    fig.tight_layout()
    files.append(d / "replicator.png")
    fig.savefig(files[-1], dpi=120)
    plt.close(fig)

    # 4. fixation probabilities relative to neutral drift
    N = s["population"]
    R = evolution.fixation * N
    with np.errstate(divide="ignore"):
        L = np.log10(np.where(np.isnan(R), 1.0, np.maximum(R, 1e-300)))
    L = np.clip(L, -3, 3)
    fig, ax = plt.subplots(figsize=(size + 1.0, size))
    from matplotlib.colors import TwoSlopeNorm

    vmax = max(0.5, float(np.abs(L).max()))
    im = ax.imshow(np.where(np.isnan(R), np.nan, L), cmap="RdBu_r", norm=TwoSlopeNorm(0.0, -vmax, vmax))
    ax.set_xticks(range(E), labels, rotation=45, ha="right", fontsize=8)
    ax.set_yticks(range(E), labels, fontsize=8)
    if E <= 14:
        for i in range(E):
            for j in range(E):
                if i != j:
                    ax.text(j, i, f"{R[i, j]:.2g}", ha="center", va="center", fontsize=7,
                            color="white" if abs(L[i, j]) > 0.6 * vmax else "black")
    ax.set_xlabel("resident")
    ax.set_ylabel("invader")
    ax.set_title(f"Moran process, N = {N}: N x fixation probability\n(> 1: selection favours the invader)",
                 fontsize=9)
    fig.colorbar(im, ax=ax, shrink=0.8, label="log10(N x fixation probability)")
    fig.tight_layout()
    files.append(d / "fixation.png")
    fig.savefig(files[-1], dpi=120)
    plt.close(fig)
    return files
