"""Figures of a simulation (matplotlib, imported lazily with the Agg backend).

* ``price_path.png`` -- the market price of the first recorded replication, price-war periods shaded;
* ``collusive_share.png`` -- share of replications in which every firm colludes, period by period,
  against the analytic curve (or level) where the baseline has one;
* ``spell_survival.png`` -- Kaplan-Meier survival curve of collusive spells with its confidence band,
  against the geometric curve of the trigger-price model where it applies.
"""

from __future__ import annotations

from pathlib import Path

import numpy as np

from sim.core.errors import InputError

__all__ = ["simulation_figures"]


def _pyplot():
    import matplotlib

    matplotlib.use("Agg", force=True)
    import matplotlib.pyplot as plt

    return plt


def _outdir(path, key: str = "plot") -> Path:
    d = Path(path)
    if d.exists() and not d.is_dir():
        raise InputError(key, f"{path} exists and is not a directory")
    try:
        d.mkdir(parents=True, exist_ok=True)
    except OSError as exc:
        raise InputError(key, f"cannot create the directory {path} ({exc.strerror})") from None
    return d


def simulation_figures(res, directory) -> list[Path]:
    """Write the three figures of a :class:`~sim.simulation.results.SimulationResult`; returns their paths."""
    d = _outdir(directory)
    plt = _pyplot()
    files = []
    conf = f"{100 * res.settings['confidence']:g}%"

    # 1. price path
    fig, ax = plt.subplots(figsize=(8, 3.5))
    P = res.paths
    if P is not None and len(P["length"]):
        H = int(P["length"][0])
        t = np.arange(1, H + 1)
        price = P["market_price"][0, :H]
        war = P["collusive"][0, :H] == 0
        ax.plot(t, price, lw=0.8, color="C0", label="market price")
        if war.any():
            edges = np.flatnonzero(np.diff(np.concatenate([[0], war.astype(int), [0]])))
            for a, b in zip(edges[::2], edges[1::2]):
                ax.axvspan(a + 0.5, b + 0.5, color="C3", alpha=0.2, lw=0)
            ax.plot([], [], color="C3", alpha=0.3, lw=6, label="price war")
        ax.axhline(res.reference["nash_price"], color="0.4", ls="--", lw=0.8, label="static-Nash price")
        ax.axhline(res.reference["collusive_price"], color="0.4", ls=":", lw=0.8, label="collusive price")
        ax.legend(loc="best", fontsize=8)
    ax.set_xlabel("period")
    ax.set_ylabel("market price")
    ax.set_title("Price path, replication 1")
    fig.tight_layout()
    files.append(d / "price_path.png")
    fig.savefig(files[-1], dpi=120)
    plt.close(fig)

    # 2. collusive share over time
    fig, ax = plt.subplots(figsize=(8, 3.5))
    share = res.collusive_by_period
    t = np.arange(1, share.shape[0] + 1)
    ax.plot(t, share, lw=0.8, color="C0", label="simulated")
    curve = res.baseline.get("collusive_by_period") if res.baseline else None
    if curve is not None:
        ax.plot(t, np.asarray(curve)[: share.shape[0]], lw=1.2, color="C1", ls="--", label="analytic")
    elif res.baseline and res.baseline.get("collusive_share") is not None:
        ax.axhline(res.baseline["collusive_share"], color="C1", ls="--", label="analytic (mean over the horizon)")
    ax.set_ylim(-0.02, 1.02)
    ax.set_xlabel("period")
    ax.set_ylabel("share of replications colluding")
    ax.set_title("Collusion over time")
    ax.legend(loc="best", fontsize=8)
    fig.tight_layout()
    files.append(d / "collusive_share.png")
    fig.savefig(files[-1], dpi=120)
    plt.close(fig)

    # 3. survival of collusive spells
    fig, ax = plt.subplots(figsize=(6, 4))
    sv = res.spells
    if sv.lengths.size:
        ax.step(sv.lengths, sv.survival, where="post", color="C0", label="Kaplan-Meier")
        ax.fill_between(sv.lengths, sv.low, sv.high, step="post", color="C0", alpha=0.2, label=f"{conf} band")
        tp = res.baseline.get("trigger_price") if res.baseline else None
        if tp is not None and tp["war_probability"] > 0:
            ax.step(sv.lengths, (1.0 - tp["war_probability"]) ** sv.lengths, where="post", color="C1", ls="--",
                    label="geometric (Green and Porter, 1984)")
    ax.set_ylim(-0.02, 1.02)
    ax.set_xlabel("spell length (periods)")
    ax.set_ylabel("share of spells lasting longer")
    ax.set_title("Survival of collusive spells")
    ax.legend(loc="best", fontsize=8)
    fig.tight_layout()
    files.append(d / "spell_survival.png")
    fig.savefig(files[-1], dpi=120)
    plt.close(fig)
    return files
