"""The factor table: the usual factors of the trade's checklist, each varied in the model with the rest held fixed.

Each factor is named by the change it considers -- fewer firms, more symmetric firms, more transparency (less
monitoring noise), more frequent interaction, growing demand -- so that "facilitates" reads "this change makes
collusion easier". The direction this model computes is set beside the direction the literature states, each with
its source (:data:`LITERATURE`; full references in :data:`REFERENCES`). Frequency is structural: the model's
definitions fix its direction, so it is reported as such and not compared. Growth is computed: the threshold of the
headline scheme with demand growing (or declining) at the stated rate g, whose effective discount factor is
``delta (1 + g)`` (grim trigger through :func:`sim.theory.demand_states.state_thresholds` with one demand state;
Ivaldi et al., 2003, section on demand growth).
"""

from __future__ import annotations

import math

import numpy as np

from sim.antitrust.compare import compare, finite_or_none, rank, sustains
from sim.antitrust.conclusion import scheme_label
from sim.antitrust.options import has_noise
from sim.antitrust.sides import scheme_threshold, symmetric_counterpart
from sim.core.errors import InputError, SolverError
from sim.theory.demand_states import DemandStates, state_thresholds

__all__ = ["FACTOR_LEGEND", "LITERATURE", "REFERENCES", "STRUCTURAL", "factor_table", "threshold_with_growth"]

#: The factor table's rows: key -> (name, the direction the literature states, its reasoning in our words, the
#: source of the direction). Each factor is named by the change it considers, so that "facilitates" reads as "this
#: change makes collusion easier". Every direction is one a source states in the place cited: the titles of
#: sections III.4 and III.5 of Ivaldi et al. (2003) ("Frequent interaction facilitates collusion", "Market
#: transparency facilitates collusion"); the abstract of Davies and Olczak (2008) ("It is conventional wisdom that
#: collusion is more likely the fewer firms there are in a market and the more symmetric they are"); section 1 of
#: Correia-da-Silva, Pinho and Vasconcelos (2013) ("Demand growth is usually understood as facilitating collusion").
LITERATURE = {
    "firms": ("fewer firms", "facilitates",
              "with fewer competitors each firm's share of the collusive profit is larger and its gain from "
              "undercutting smaller, so collusion is easier to sustain",
              "Davies and Olczak (2008), abstract; discussed in Ivaldi et al. (2003), section III.1"),
    "symmetry": ("more symmetric firms", "facilitates",
                 "asymmetries in costs, capacities or market shares hinder collusion: the advantaged firm gains "
                 "more from deviating and less from colluding", "Davies and Olczak (2008), abstract"),
    "transparency": ("more transparent (less noise)", "facilitates",
                     "market transparency facilitates collusion: deviations are detected, and punished, sooner and "
                     "price wars are not set off by mistake", "Ivaldi et al. (2003), section III.5"),
    "frequency": ("more frequent interaction", "facilitates",
                  "frequent interaction (and frequent price adjustment) facilitates collusion: retaliation comes "
                  "sooner", "Ivaldi et al. (2003), section III.4"),
    "growth": ("growing demand", "facilitates",
               "collusion is easier in growing markets, where tomorrow's profits weigh more, and harder in "
               "declining ones",
               "Correia-da-Silva, Pinho and Vasconcelos (2013), section 1; discussed in Ivaldi et al. (2003), "
               "section III.6"),
    "contact": ("more multimarket contact", "facilitates",
                "firms that meet in several markets pool their incentive constraints: a deviation in one market is "
                "punished in every market they share, so slack in one market can sustain collusion in another; "
                "pooling identical markets changes nothing",
                "Bernheim and Whinston (1990), RAND Journal of Economics 21(1)"),
}
#: The works the factor table cites, in full.
REFERENCES = {
    "Ivaldi et al. (2003)": "Ivaldi, M., B. Jullien, P. Rey, P. Seabright and J. Tirole (2003), The Economics of "
                            "Tacit Collusion, final report for DG Competition, European Commission",
    "Davies and Olczak (2008)": "Davies, S. and M. Olczak (2008), Tacit versus overt collusion, firm asymmetries and "
                                "numbers: what's the evidence?, Competition Policy International",
    "Haltiwanger and Harrington (1991)": "Haltiwanger, J. and J. E. Harrington (1991), The impact of cyclical "
                                         "demand movements on collusive behavior, RAND Journal of Economics 22(1), "
                                         "89-106",
    "Bernheim and Whinston (1990)": "Bernheim, B. D. and M. D. Whinston (1990), Multimarket contact and collusive "
                                    "behavior, RAND Journal of Economics 21(1), 1-26",
    "Correia-da-Silva, Pinho and Vasconcelos (2013)": "Correia-da-Silva, J., J. Pinho and H. Vasconcelos (2013), "
                                                      "Cartel stability and profits under different reactions to "
                                                      "entry in markets with growing demand, FEP Working Paper 487, "
                                                      "University of Porto",
}
#: Direction of a factor whose effect follows from the model's definitions rather than a computation.
STRUCTURAL = "structural (by construction)"
#: How to read the factor table (the bundle shows it once, below the table; every row's ``reading`` says the same
#: for that row, also in the CSV).
FACTOR_LEGEND = ("Each factor is named by the change it considers. 'facilitates': in the model that change makes "
                 "collusion easier (a lower critical discount factor, or more persistent simulated collusion); "
                 "'hinders': it makes collusion harder; 'no effect': no difference (for simulations, none beyond "
                 "1.96 standard errors); 'mixed': the markets before and after the merger disagree; 'not "
                 "computed': the model cannot vary the factor here (see the note). 'structural (by construction)': "
                 "the direction follows from the model's definitions (the discount factor per interaction) and "
                 "is not computed, so it is not compared with the literature "
                 "and 'agree' is left empty; the row reports how far each market is from its threshold.")

#: Subject of each factor's reading, and whether it takes a plural verb.
_SUBJECTS = {"firms": ("fewer firms", True), "symmetry": ("more symmetric firms", True),
             "transparency": ("less monitoring noise", False), "frequency": ("more frequent interaction", False),
             "growth": ("growing demand", False), "contact": ("more multimarket contact", False)}
_Z95 = 1.959963984540054


def _direction_from(base: float, varied: float) -> str:
    """'facilitates' when the varied setting makes collusion easier than the base."""
    return {"easier": "facilitates", "harder": "hinders", "unchanged": "no effect"}[compare(base, varied)]


def _combine(dirs: list) -> str:
    dirs = [d for d in dirs if d not in (None, "not computed")]
    if not dirs:
        return "not computed"
    return dirs[0] if all(d == dirs[0] for d in dirs) else "mixed"


def _reading(key: str, direction: str, lit_dir: str) -> str:
    """One row of the factor table in words (what its direction cells mean)."""
    subj, plural = _SUBJECTS[key]
    make, have = ("make", "have") if plural else ("makes", "has")
    model = {
        "facilitates": f"in the model {subj} {make} collusion easier",
        "hinders": f"in the model {subj} {make} collusion harder",
        "no effect": f"in the model {subj} {have} no effect on collusion",
        "mixed": f"in the model {subj} {make} collusion easier in one market and not in the other",
        "not computed": "the model does not vary this factor here (see the note)",
        STRUCTURAL: f"structural: by construction of the model {subj} can only make collusion easier (or leave it "
                    "unchanged), so this is not a computed direction and is not compared with the literature",
    }[direction]
    lit = {"facilitates": "easier", "hinders": "harder"}[lit_dir]
    return f"{model}; in the literature {subj} {make} collusion {lit}"


def _row(key: str, varied: str, measure: str, vals: dict, direction: str, note: str = "") -> dict:
    name, lit_dir, lit_text, source = LITERATURE[key]
    structural = direction == STRUCTURAL
    agrees = None if structural or direction in ("not computed", "mixed") else direction == lit_dir
    return {"key": key, "factor": name, "varied": varied, "measure": measure, "values": vals,
            "model_direction": direction, "structural": structural, "literature_direction": lit_dir,
            "literature": lit_text, "source": source, "agrees": agrees,
            "reading": _reading(key, direction, lit_dir), "note": note}


def _fewer_firms(pre, opts: dict, measure: str) -> dict:
    # symmetric counterparts of the pre-merger market with F and F - 1 firms (firms, not products: a firm
    # owning several products keeps as many in the counterparts when every firm owns the same number)
    pre_ms = pre.spec()
    F = pre_ms.n_firms
    counts = np.bincount(pre_ms.owner, minlength=F)
    k = int(counts[0]) if np.all(counts == counts[0]) else 1
    per = "single-product firms" if k == 1 else f"firms of {k} products each"
    notes = []
    if pre_ms.multi_product and k == 1:
        notes.append("the pre-merger firms own different numbers of products; the counterparts give each firm one")
    if F <= 2:
        notes.append("a duopoly has no symmetric counterpart with fewer firms")
    try:
        t_n = scheme_threshold(symmetric_counterpart(pre, n_firms=F, products_per_firm=k), opts)[0]
        t_m = (scheme_threshold(symmetric_counterpart(pre, n_firms=F - 1, products_per_firm=k), opts)[0] if F > 2
               else math.nan)
        return _row("firms", f"symmetric counterpart of the pre-merger market: {F} vs {F - 1} {per}", measure,
                    {"base": finite_or_none(t_n), "varied": finite_or_none(t_m), "base_label": f"{F} firms",
                     "varied_label": f"{F - 1} firms", "products_per_firm": k},
                    _direction_from(t_n, t_m) if F > 2 else "not computed", "; ".join(notes))
    except (InputError, SolverError) as exc:
        return _row("firms", "symmetric counterpart", measure, {}, "not computed", "; ".join([*notes, str(exc)]))


def _symmetry(sides, opts: dict, measure: str) -> dict:
    # each side against its counterpart with costs and demand made alike
    vals, dirs, notes = {}, [], []
    for side in sides:
        try:
            sym = symmetric_counterpart(side.market, keep_owner=True)
            t_act = side.headline(opts).market
            a_ms, s_ms = side.market.spec(), sym.spec()
            if (np.array_equal(a_ms.cost, s_ms.cost) and np.array_equal(a_ms.demand.vector, s_ms.demand.vector)
                    and np.array_equal(a_ms.capacity, s_ms.capacity)):
                vals[side.label] = {"actual": finite_or_none(t_act), "symmetric": finite_or_none(t_act)}
                dirs.append("not computed")
                notes.append(f"{side.label}: costs and demand are already symmetric"
                             + (" (ownership is not)" if a_ms.multi_product else ""))
                continue
            t_sym = scheme_threshold(sym, opts)[0]
            vals[side.label] = {"actual": finite_or_none(t_act), "symmetric": finite_or_none(t_sym)}
            dirs.append(_direction_from(t_act, t_sym))
            if side.market.owner is not None:
                notes.append(f"{side.label}: cost and demand asymmetries removed, ownership asymmetry kept")
        except (InputError, SolverError) as exc:
            vals[side.label] = {}
            notes.append(f"{side.label}: {exc}")
    return _row("symmetry", "each market against its counterpart with mean costs, mean qualities or intercepts and "
                            "equal capacities and shares", measure, vals, _combine(dirs), "; ".join(notes))


def _transparency(sides, opts: dict, mon) -> dict:
    # simulated persistence at the experiment's noise and at a multiple of it
    ts = opts["transparency_scale"]
    if sides[0].rescaled is None:
        why = ("the experiment's monitoring has no noise to vary" if not has_noise(mon)
               else "simulations were not run (assess.simulate = false)")
        return _row("transparency", "monitoring noise", "simulated share of collusive periods", {}, "not computed",
                    why)
    vals, dirs = {}, []
    for side in sides:
        e1 = side.simulation.metrics["collusive_share"]
        e2 = side.rescaled.metrics["collusive_share"]
        vals[side.label] = {"noise": e1.value, "noise_ci": [e1.low, e1.high], "scale": ts,
                            "scaled_noise": e2.value, "scaled_noise_ci": [e2.low, e2.high]}
        less, more = (e1, e2) if ts > 1 else (e2, e1)
        se = math.sqrt(e1.se ** 2 + e2.se ** 2)
        if not math.isfinite(se) or abs(less.value - more.value) <= _Z95 * se:
            dirs.append("no effect")
        else:
            dirs.append("facilitates" if less.value > more.value else "hinders")
    return _row("transparency", f"monitoring noise (demand-shock sigma, perception and implementation errors) "
                                f"multiplied by {ts:g}", "simulated share of collusive periods (95% CI)", vals,
                _combine(dirs), "less noise means more transparency; 'no effect' when the difference is within 1.96 "
                                "standard errors")


def _frequency(sides, opts: dict, delta: float) -> dict:
    # per-interaction discount factor delta^(1/k) when firms meet k times as often -- a structural property of
    # the model, reported as how far each market is from its threshold
    vals = {}
    for side in sides:
        t = side.headline(opts).market
        if math.isfinite(rank(t)) and 0 < t < 1 and 0 < delta < 1:
            vals[side.label] = {"threshold": t, "longest_interval": math.log(t) / math.log(delta),
                                "sustainable_half_as_often": sustains(t, delta ** 2),
                                "sustainable": sustains(t, delta),
                                "sustainable_twice_as_often": sustains(t, math.sqrt(delta))}
        elif math.isfinite(rank(t)) and t == 0:
            vals[side.label] = {"threshold": 0.0, "longest_interval": math.inf}
        else:
            vals[side.label] = {"threshold": finite_or_none(t)}
    return _row("frequency", "firms interact k times as often: the discount factor per interaction becomes "
                             "delta^(1/k)",
                "longest interval between interactions (in periods) that still sustains collusion: ln(threshold) / "
                "ln(delta)", vals, STRUCTURAL, "the thresholds are per interaction; more frequent interaction raises "
                                               "the discount factor per interaction, which can only help")


def _growth_varied(g: float) -> str:
    if g > 0:
        return (f"demand growing by {g:g} per period (and declining at that rate, for comparison): effective discount "
                "factor delta (1 + g)")
    if g < 0:
        return (f"demand declining by {-g:g} per period, as stated (and growing at that rate, for comparison): "
                "effective discount factor delta (1 + g)")
    return ("no growth stated (g = 0): the growth or decline per period each market can bear; effective discount "
            "factor delta (1 + g)")


def threshold_with_growth(market, agreement: str, scheme: str, threshold: float, g: float) -> float:
    """The critical discount factor of a scheme when every stage profit grows at rate ``g`` per period.

    A stream growing at rate g and discounted at delta is worth the constant stream discounted at ``beta =
    delta (1 + g)``, so every threshold condition holds on the scale of beta and ``delta*(g) = beta* / (1 + g)``
    (Ivaldi, Jullien, Rey, Seabright and Tirole, 2003, The Economics of Tacit Collusion, section on demand growth;
    for grim trigger, ``delta*(g) = (pi_D - pi_C) / ((pi_D - pi_N)(1 + g))``). Grim trigger is computed through
    :func:`sim.theory.demand_states.state_thresholds` with one demand state growing at g; the other schemes divide
    their threshold by ``1 + g``.

    Parameters
    ----------
    market : Market
    agreement : str
    scheme : {"grim", "finite", "stick_carrot"}
    threshold : float
        The scheme's threshold without growth (nan: not sustainable below one).
    g : float in (-1, 1)

    Returns
    -------
    float
        nan when no discount factor below one sustains the agreement with growth g.
    """
    if scheme == "grim":
        return float(state_thresholds(DemandStates.iid([1.0], growth=g), [market], agreement).market)
    if not math.isfinite(rank(threshold)):
        return math.nan
    t = threshold / (1.0 + g)
    return t if t < 1.0 else math.nan


def _growth_effect(t: float, tg: float, g: float) -> str:
    """The growth row's sentence for one market: harder or easier, and by how much."""
    if g == 0:
        return ""
    if not math.isfinite(rank(tg)):
        return (f"at g = {g:+g} no discount factor below one sustains the agreement (without growth: "
                f"{t:.4g}); a decline of {-g:g} per period makes collusion impossible" if g < 0 else "")
    if not math.isfinite(rank(t)):
        return f"at g = {g:+g} the threshold is {tg:.4g} (no discount factor below one sustains it without growth)"
    word = "harder" if g < 0 else "easier"
    return (f"at g = {g:+g} the threshold is {tg:.4g} instead of {t:.4g} ({tg - t:+.4g}, {tg / t - 1.0:+.2%}): "
            f"collusion is {word}")


def _growth(sides, opts: dict, delta: float) -> dict:
    # the threshold with demand growing (declining) at the stated rate g, computed; the row also reports the growth
    # or decline each market bears at delta and the flags at the stated rate's size |g| either way
    g = opts["growth"]
    size = abs(g)
    vals, dirs, notes = {}, [], []
    for side in sides:
        t = side.headline(opts).market
        try:
            tg = threshold_with_growth(side.market, opts["agreement"], opts["scheme"], t, g)
        except (InputError, SolverError) as exc:
            tg = math.nan
            notes.append(f"{side.label}: {exc}")
        up, down = min(delta * (1 + size), 1.0 - 1e-15), delta * (1 - size)
        effect = _growth_effect(t, tg, g)
        vals[side.label] = {"threshold": finite_or_none(t), "threshold_with_growth": finite_or_none(tg),
                            "change_with_growth": (tg - t) if math.isfinite(rank(t)) and math.isfinite(rank(tg))
                            else None,
                            "sustainable_with_growth": sustains(tg, min(delta, 1.0 - 1e-15)),
                            "growth_needed": (t / delta - 1.0) if math.isfinite(rank(t)) and delta > 0 else None,
                            "sustainable_declining": sustains(t, down), "sustainable": sustains(t, delta),
                            "sustainable_growing": sustains(t, up), "effect": effect}
        if g != 0:
            # "growing demand" is the change from the lower rate to the higher one; a market that no discount
            # factor below one holds either way shows no direction
            low, high = (tg, t) if g < 0 else (t, tg)
            both_out = not (math.isfinite(rank(t)) or math.isfinite(rank(tg)))
            dirs.append("not computed" if both_out else _direction_from(low, high))
        if effect:
            notes.append(f"{side.label}: {effect}")
    if g == 0:
        notes.append("no growth stated (assess.growth = 0): the row reports the growth each market needs")
    return _row("growth", _growth_varied(g),
                f"critical discount factor ({scheme_label(opts)}) with demand growing at the stated rate g: "
                "threshold / (1 + g); and the growth per period needed for sustainability, threshold / delta - 1 "
                "(negative: the decline tolerated)",
                vals, _combine(dirs) if dirs else "not computed",
                "; ".join([*notes, "assumes every stage profit scales with demand (true of the shipped demand systems "
                                   "when quantities scale; capacities grow with demand)"]))


def factor_table(pre, before, after, opts: dict, delta: float, mon, step) -> list:
    """The factor table (see the module notes).

    Parameters
    ----------
    pre : Market
        The pre-merger market.
    before, after : Side
        The two sides, with their simulations (and the rescaled-noise simulations of the transparency factor).
    opts : dict
        The validated options.
    delta : float
        The discount factor of the conclusion.
    mon : Monitoring
        The experiment's monitoring.
    step : callable
        ``step(what)``, called after each part (progress).

    Returns
    -------
    list of dict
        One row per factor: ``key``, ``factor``, ``varied``, ``measure``, ``values``, ``model_direction``,
        ``structural``, the literature's direction and reasoning, ``agrees``, ``reading`` and ``note``.
    """
    measure = f"critical discount factor ({scheme_label(opts)})"
    sides = (before, after)
    rows = [_fewer_firms(pre, opts, measure)]
    step("factors: fewer firms")
    rows.append(_symmetry(sides, opts, measure))
    step("factors: more symmetric firms")
    rows += [_transparency(sides, opts, mon), _frequency(sides, opts, delta), _growth(sides, opts, delta)]
    step("factors")
    return rows
