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

from sim.core.jsonutil import dumps
from sim.core.stats import normal_quantile as z
from sim.core.text import fmt_num

# one check-and-create of output folders for the simulation and tournament figures and tables
from sim.evidence.simplots import _outdir as output_dir
from sim.evidence.simplots import _pyplot
from sim.runner.analyses.tournament import describe as describe_tournament
from sim.runner.analyses.tournament import metric_label
from sim.runner.experiment import leading_comment
from sim.tournament.roundrobin import EVOLUTION_DEFAULTS, SCORE_NAMES, TOURNAMENT_DEFAULTS

__all__ = ["fixation_figure", "heatmap_figure", "output_dir", "ranking_figure", "replicator_figure",
           "tournament_figures", "tournament_json", "write_tables"]

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

    return z(confidence)


# --------------------------------------------------------------------------------------------------
# Figures
# --------------------------------------------------------------------------------------------------


def tournament_figures(result, directory, evolution=None, key: str = "--plot") -> list[Path]:
    """Write ``score_heatmap.png``, ``ranking.png`` and, with the evolutionary analysis,
    ``replicator.png`` and ``fixation.png``; returns the paths."""
    d = output_dir(directory, key)
    plt = _pyplot()
    score = result.score

    name = SCORE_NAMES[score]
    files = []
    beats = result.pairwise[score]["beats"] if result.pairwise is not None else None
    figs = [("score_heatmap", heatmap_figure(result.versus[score], result.labels, name, result.plan.seats, beats))]
    st = result.stability
    order = result.order
    est = [result.scores[score][e] for e in order]
    figs.append(("ranking", ranking_figure(
        [result.labels[e] for e in order], [int(result.ranks[e]) for e in order], [x.value for x in est],
        [x.low for x in est], [x.high for x in est], name, result.plan.settings["confidence"],
        rank_share=[st["per_entrant"]["rank_share"][e] for e in order] if st else None,
        ranking_holds=st["ranking_holds"] if st else None, resamples=st["resamples"] if st else None)))
    if evolution is not None:
        s = evolution.settings
        rp = evolution.replicator
        figs.append(("replicator", replicator_figure(np.arange(rp.shares.shape[0]), rp.shares, result.labels, name,
                                                     s["fitness"], s["selection"])))
        figs.append(("fixation", fixation_figure(evolution.fixation * s["population"], result.labels,
                                                 s["population"])))
    for stem, fig in figs:
        files.append(d / f"{stem}.png")
        fig.savefig(files[-1], dpi=120)
        plt.close(fig)
    return files


def heatmap_figure(V, labels, name: str, seats: int, beats=None):
    """The score heatmap: ``V[i, j]``, the row entrant's payoff when every rival is the column entrant;
    ``beats`` (two seats) frames the matches the row entrant wins. Returns the matplotlib figure."""
    plt = _pyplot()
    V = np.asarray(V, dtype=float)
    E = len(labels)
    size = max(4.0, 0.55 * E + 2.0)
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
        if beats is not None:
            B = np.asarray(beats)
            for i in range(E):
                for j in range(E):
                    if B[i, j] > 0:
                        ax.add_patch(plt.Rectangle((j - 0.5, i - 0.5), 1, 1, fill=False, ec="C3", lw=1.5))
    ax.set_xlabel("rivals (every rival plays this entrant)" if seats > 2 else "opponent")
    ax.set_ylabel("entrant")
    title = f"{name.capitalize()} of the row entrant"
    if beats is not None:
        title += "\n(red frame: beats the opponent in their match)"
    ax.set_title(title, fontsize=10)
    fig.colorbar(im, ax=ax, shrink=0.8, label=name)
    fig.tight_layout()
    return fig


def ranking_figure(labels, ranks, values, lows, highs, name: str, confidence: float, rank_share=None,
                   ranking_holds=None, resamples=None):
    """The ranking with intervals, entrants from first (top) to last, each with its rank and, with the
    bootstrap, the share of resamples in which it keeps it. Returns the matplotlib figure."""
    plt = _pyplot()
    E = len(labels)
    fig, ax = plt.subplots(figsize=(7, max(3.0, 0.4 * E + 1.2)))
    y = np.arange(E)[::-1]
    vals = np.asarray(values, dtype=float)
    lo = np.asarray(lows, dtype=float)
    hi = np.asarray(highs, dtype=float)
    ax.errorbar(vals, y, xerr=[np.nan_to_num(vals - lo), np.nan_to_num(hi - vals)], fmt="o", color="C0", capsize=3,
                label=f"{100 * confidence:g}% interval")
    ticks = []
    for k in range(E):
        t = f"{int(ranks[k])}. {labels[k]}"
        if rank_share is not None:
            t += f"  ({100 * rank_share[k]:.0f}% keep rank)"
        ticks.append(t)
    ax.set_yticks(y, ticks, fontsize=8)
    ax.set_xlabel(name)
    ttl = f"Ranking by {name}"
    if ranking_holds is not None:
        ttl += f"; whole ranking holds in {100 * ranking_holds:.0f}% of {int(resamples)} resamples"
    ax.set_title(ttl, fontsize=9)
    ax.grid(axis="x", alpha=0.3)
    fig.tight_layout()
    return fig


def replicator_figure(generation, shares, labels, name: str, fitness: str, selection: float):
    """Population shares over generations (``shares`` of shape (points, E)). Returns the matplotlib figure."""
    plt = _pyplot()
    shares = np.asarray(shares, dtype=float)
    fig, ax = plt.subplots(figsize=(8, 4))
    for e in range(len(labels)):
        ax.plot(generation, shares[:, e], lw=1.2, label=labels[e], color=f"C{e % 10}", ls="-" if e < 10 else "--")
    ax.set_ylim(-0.02, 1.02)
    ax.set_xlabel("generation")
    ax.set_ylabel("population share")
    fmap = "1 - w + w payoff" if fitness == "linear" else "exp(w payoff)"
    ax.set_title(f"Replicator dynamics on the {name} (fitness {fmap}, w = {selection:g})", fontsize=9)
    ax.legend(fontsize=7, ncol=2 if len(labels) > 6 else 1, loc="best")
    fig.tight_layout()
    return fig


def fixation_figure(times_n, labels, N: int):
    """``N`` times the Moran fixation probability of each invader (row) against each resident (column),
    on a log scale centred on neutral drift. Returns the matplotlib figure."""
    plt = _pyplot()
    from matplotlib.colors import TwoSlopeNorm

    R = np.asarray(times_n, dtype=float)
    E = len(labels)
    size = max(4.0, 0.55 * E + 2.0)
    with np.errstate(divide="ignore"):
        L = np.log10(np.where(np.isnan(R), 1.0, np.maximum(R, 1e-300)))
    L = np.clip(L, -3, 3)
    fig, ax = plt.subplots(figsize=(size + 1.0, size))
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
    return fig


# --------------------------------------------------------------------------------------------------
# Evidence bundle of a run folder (the experiment kind's ``report`` hook)
# --------------------------------------------------------------------------------------------------


def _pct(x) -> str:
    return "-" if x is None or not math.isfinite(float(x)) else f"{100 * float(x):.0f}%"


def _interval(m: dict, name: str) -> str:

    lo, hi = m.get(f"{name}.low", math.nan), m.get(f"{name}.high", math.nan)
    if not (math.isfinite(lo) and math.isfinite(hi)):
        return "-"
    return f"[{fmt_num(lo)}, {fmt_num(hi)}]"


def _cell_settings(doc: dict) -> dict:
    """What a cell's document says about its tournament (the defaults of :mod:`sim.tournament.roundrobin` where it is
    silent): the entrants' labels and metric names, the score, the confidence level and the evolutionary
    settings."""

    tour = doc.get("tournament", {})
    labels = [str(e.get("label")) for e in doc.get("entrants", []) if isinstance(e, dict)]
    out = {**TOURNAMENT_DEFAULTS, **EVOLUTION_DEFAULTS, **{k: v for k, v in tour.items()}}
    out.update(labels=labels, names=metric_label(labels), score_name=SCORE_NAMES[out["score"]])
    return out


def kind_report(rf, b) -> None:
    """The tournament's account of a finished run in its evidence bundle (:attr:`sim.runner.kinds.Kind.report`):
    the setup, and per cell the ranking with its intervals and stability, who beats whom, the evolutionary
    analysis and the four figures of ``supergame tournament --plot``; a sweep gets a table of every cell's
    outcome and, over one numeric parameter, the scores along it. Everything is read from the stored rows
    (metrics and arrays); ranks and counts are shown as integers."""

    exp = rf.experiment
    rows = rf.rows()
    desc = exp.description or leading_comment(exp.text or "")
    if desc:
        b.heading("What the experiment asks")
        for para in desc.split("\n\n"):
            b.paragraph(" ".join(para.split()))
    b.heading("Setup")
    b.bullets(describe_tournament(exp.doc))
    ok = [r for r in rows if r.status == "ok"]
    if not exp.parameters:
        b.heading("Results")
        if ok:
            _cell_account(b, _cell_settings(exp.doc), ok[0])
        else:
            b.paragraph("The cell failed: no results to report (see the failed cells below).", note=True)
        return
    b.paragraph("These are the file's settings; the values of " + ", ".join(f"`{p.path}`" for p in exp.parameters)
                + " are those of the sweep below.", note=True)
    b.heading("Sweep")
    b.table("sweep", ["parameter", "values", "number"],
            [[p.path, ", ".join(p.labels), len(p)] for p in exp.parameters], caption="Swept parameters")
    b.heading("Results")
    _sweep_account(b, exp, ok)


def _cell_account(b, cs: dict, row) -> None:

    m, a = row.metrics, row.arrays
    labels, names = cs["labels"], cs["names"]
    E, seats = int(m["entrants"]), int(m["seats"])
    sname = cs["score_name"]
    pct = f"{100 * cs['confidence']:g}%"
    b.paragraph(f"{E} entrants over {seats} seats, {int(m['matches'])} matches (every group of entrants, "
                f"self-play included); ranked by {sname}.")
    order = sorted(range(E), key=lambda e: (m[f"rank.{names[e]}"], e))
    boot = math.isfinite(m.get("ranking_holds", math.nan))

    others = [k for k in _METRICS if k != cs["score"]]
    head = ["rank", "entrant", sname, f"{pct} CI", *(SCORE_NAMES[k] for k in others)]
    if boot:
        head += ["keeps rank", "first in"]
    if seats == 2:
        head += ["wins", "losses"]
    body = []
    for e in order:
        n = names[e]
        r = [int(m[f"rank.{n}"]), labels[e], m[f"score.{n}"], _interval(m, f"score.{n}"),
             *(m[f"{k}.{n}"] for k in others)]
        if boot:
            r += [_pct(m[f"rank_share.{n}"]), _pct(m[f"top_share.{n}"])]
        if seats == 2:
            r += [int(m[f"wins.{n}"]), int(m[f"losses.{n}"])]
        body.append(r)
    note = "scores are expected payoffs against rivals drawn uniformly from the entrants"
    if boot:
        note += (f"; the whole ranking holds in {_pct(m['ranking_holds'])} of {int(cs['bootstrap'])} bootstrap "
                 "resamples of the replications")
    if seats == 2:
        note += (f"; wins and losses count the matches in which the entrant earns more (less) than its opponent "
                 f"beyond the {pct} margin of the paired difference")
    b.table("ranking", head, body, caption=f"Ranking by {sname}", note=note)

    if "versus" in a:
        cap = (f"{sname.capitalize()} of the row entrant " + ("against the column entrant (self-play on the diagonal)"
               + ("; red frame: beats the opponent in their match" if "beats" in a else "") if seats == 2
               else "when every rival plays the column entrant") + ".")
        b.figure("score-heatmap", heatmap_figure(a["versus"], labels, sname, seats, a.get("beats")), cap)
    b.figure("ranking", ranking_figure(
        [labels[e] for e in order], [int(m[f"rank.{names[e]}"]) for e in order],
        [m[f"score.{names[e]}"] for e in order], [m.get(f"score.{names[e]}.low", math.nan) for e in order],
        [m.get(f"score.{names[e]}.high", math.nan) for e in order], sname, cs["confidence"],
        rank_share=[m[f"rank_share.{names[e]}"] for e in order] if boot else None,
        ranking_holds=m["ranking_holds"] if boot else None, resamples=cs["bootstrap"] if boot else None),
        f"Ranking by {sname} with {pct} confidence intervals (simulation error only)"
        + ("; in brackets the share of bootstrap resamples in which each entrant keeps its rank." if boot else "."))

    N = int(cs["population"])
    b.heading("Evolutionary dynamics", level=3)
    fmap = "1 - w + w x payoff" if cs["fitness"] == "linear" else "exp(w x payoff)"
    body = [[labels[e], m[f"share.{names[e]}"], m[f"rare_mutation_share.{names[e]}"],
             "yes" if m[f"ess.{names[e]}"] else "no", "yes" if m[f"ess_n.{names[e]}"] else "no"] for e in range(E)]
    b.table("evolution", ["entrant", f"share after {int(cs['generations'])} generations", "rare-mutation share",
                          "ESS", f"ESS_N (N = {N})"], body,
            caption=f"Evolutionary dynamics on the {sname} (fitness {fmap}, w = {fmt_num(float(cs['selection']))})",
            note="replicator dynamics from the initial shares; rare-mutation share: time spent as the resident type "
                 "when mutants arise rarely (Fudenberg and Imhof, 2006); ESS: resists a small share of every other "
                 "entrant in a large population; ESS_N: a single invader is less fit and fixes with probability "
                 "below 1/N (Nowak et al., 2004)")
    if "replicator.shares" in a:
        b.figure("replicator", replicator_figure(np.asarray(a["replicator.generation"]), a["replicator.shares"], labels,
                                                 sname, cs["fitness"], float(cs["selection"])),
                 "Population shares under the discrete replicator dynamics.")
    if "fixation" in a:
        b.figure("fixation", fixation_figure(np.asarray(a["fixation"], dtype=float) * N, labels, N),
                 f"Moran process, N = {N}: N times the probability that one invader (row) takes over a population of "
                 "the resident (column); above 1, selection favours the invader.")
    gap = m.get("moran.max_standard_errors", math.nan)
    if math.isfinite(gap):
        b.paragraph(f"The simulated invasions ({int(cs['moran_runs'])} per pair) lie within {fmt_num(gap, 3)} binomial "
                    "standard errors of the fixation formula at the worst pair.", note=True)


def _sweep_account(b, exp, ok) -> None:

    if not ok:
        b.paragraph("No cell finished: no results to report (see the failed cells below).", note=True)
        return
    body = []
    for r in ok:
        cs = _cell_settings(exp.cell(r.cell).doc)
        m, labels, names = r.metrics, cs["labels"], cs["names"]
        first = [labels[e] for e in range(len(labels)) if m[f"rank.{names[e]}"] == 1]
        top = max(range(len(labels)), key=lambda e: m[f"share.{names[e]}"])
        ess_n = [labels[e] for e in range(len(labels)) if m[f"ess_n.{names[e]}"]]
        body.append([r.number, *[r.labels[p.path] for p in exp.parameters], ", ".join(first),
                     m[f"score.{names[labels.index(first[0])]}"], _pct(m["ranking_holds"]),
                     f"{labels[top]} ({fmt_num(m[f'share.{names[top]}'])})", ", ".join(ess_n) or "-"])
    cs0 = _cell_settings(exp.cell(ok[0].cell).doc)
    b.table("cells", ["cell", *[p.path for p in exp.parameters], "first", cs0["score_name"], "ranking holds",
                      "largest share after the replicator dynamics", "ESS_N"], body,
            caption="Outcome of every finished cell",
            note="first: the entrant(s) ranked first by the cell's score; ranking holds: share of bootstrap resamples "
                 "that keep the whole ranking")
    numeric = [p for p in exp.parameters if p.numeric]
    if len(exp.parameters) != 1 or not numeric:
        return
    p = numeric[0]
    plt = _pyplot()
    fig, ax = plt.subplots(figsize=(7.5, 4))
    labels, names = cs0["labels"], cs0["names"]
    xs = np.array([float(r.params[p.path]) for r in ok])
    srt = np.argsort(xs)
    for e in range(len(labels)):
        v = np.array([r.metrics[f"score.{names[e]}"] for r in ok])[srt]
        lo = np.array([r.metrics.get(f"score.{names[e]}.low", math.nan) for r in ok])[srt]
        hi = np.array([r.metrics.get(f"score.{names[e]}.high", math.nan) for r in ok])[srt]
        ax.plot(xs[srt], v, marker="o", ms=3, lw=1.2, color=f"C{e % 10}", label=labels[e])
        ax.fill_between(xs[srt], lo, hi, color=f"C{e % 10}", alpha=0.15, lw=0)
    if p.log:
        ax.set_xscale("log")
    ax.set_xlabel(p.path)
    ax.set_ylabel(cs0["score_name"])
    ax.grid(alpha=0.3)
    ax.legend(fontsize=7, ncol=2 if len(labels) > 6 else 1)
    fig.tight_layout()
    b.figure("scores-over-sweep", fig, f"Each entrant's {cs0['score_name']} against {p.path}; band: "
                                      f"{100 * cs0['confidence']:g} % confidence interval (simulation error only).")
