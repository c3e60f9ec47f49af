"""Helpers shared by command modules: flags that describe a market, number lists, output."""

from __future__ import annotations

import argparse
import sys

from sim.core.errors import InputError

# flag -> key of the [market] table
MARKET_FLAGS = {
    "model": "model",
    "demand": "demand",
    "firms": "n_firms",
    "intercept": "intercept",
    "slope": "slope",
    "substitution": "substitution",
    "quality": "quality",
    "outside": "outside",
    "mu": "mu",
    "size": "size",
    "elasticity": "elasticity",
    "scale": "scale",
    "cost": "cost",
    "capacity": "capacity",
    "split": "split",
    "tick": "tick",
}
_LISTS = {"intercept", "quality", "cost", "capacity", "split"}


def add_market_flags(p: argparse.ArgumentParser) -> None:
    g = p.add_argument_group("market (overrides the [market] table of FILE)")
    g.add_argument("--model", choices=["cournot", "bertrand"], help="competition in quantities or prices")
    g.add_argument("--demand", choices=["linear", "differentiated", "logit", "isoelastic"], help="demand system")
    g.add_argument("--firms", type=str, metavar="N", help="number of firms")
    g.add_argument("--intercept", metavar="A", help="linear/differentiated demand intercept (per firm: a,b,c)")
    g.add_argument("--slope", metavar="B", help="slope of linear inverse demand")
    g.add_argument("--substitution", metavar="G", help="substitutability in [0, 1] (differentiated)")
    g.add_argument("--quality", metavar="Q", help="logit quality index (per firm: a,b,c)")
    g.add_argument("--outside", metavar="Q0", help="logit outside-good index")
    g.add_argument("--mu", metavar="MU", help="logit horizontal differentiation")
    g.add_argument("--size", metavar="M", help="logit market size")
    g.add_argument("--elasticity", metavar="E", help="isoelastic demand: absolute elasticity (> 1)")
    g.add_argument("--scale", metavar="S", help="isoelastic demand: price at total quantity 1")
    g.add_argument("--cost", metavar="C", help="marginal cost (one value, or per firm: c1,c2,...)")
    g.add_argument("--capacity", metavar="K", help="capacity (one value or per firm), Cournot only")
    g.add_argument("--split", metavar="W", help="homogeneous Bertrand: tie-sharing weights per firm")
    g.add_argument("--tick", metavar="D", help="homogeneous Bertrand price step (0: continuous)")


def parse_number(flag: str, text: str, integer: bool = False):
    try:
        if integer:
            v = float(text)
            if not v.is_integer():
                raise ValueError
            return int(v)
        return float(text)
    except ValueError:
        kind = "an integer" if integer else "a number"
        raise InputError(f"--{flag}", f"expected {kind}, got {text!r}") from None


def parse_numbers(flag: str, text: str):
    """One number, or a comma-separated list of numbers (returned as a list)."""
    parts = [t.strip() for t in str(text).split(",")]
    if any(t == "" for t in parts):
        raise InputError(f"--{flag}", f"expected a number or comma-separated numbers, got {text!r}")
    vals = [parse_number(flag, t) for t in parts]
    return vals[0] if len(vals) == 1 else vals


def market_table_from_args(args, base: dict | None = None) -> tuple[dict, set]:
    """The [market] table from FILE (if any) with flags applied on top; also the keys set by flags."""
    table = dict(base or {})
    from_flags = set()
    for flag, key in MARKET_FLAGS.items():
        val = getattr(args, flag, None)
        if val is None:
            continue
        if flag in ("model", "demand"):
            table[key] = val
        elif flag == "firms":
            table[key] = parse_number(flag, val, integer=True)
        elif flag in _LISTS:
            v = parse_numbers(flag, val)
            # a single value replacing a per-firm list of the file keeps the file's number of firms
            if not isinstance(v, list) and isinstance(table.get(key), list) and "n_firms" not in table:
                v = [v] * len(table[key])
            table[key] = v
        else:
            table[key] = parse_number(flag, val)
        from_flags.add(key)
    return table, from_flags


def flag_error(exc: InputError, from_flags: set, prefix: str = "market") -> InputError:
    """Rename ``market.cost`` to ``--cost`` when the value came from a flag."""
    inv = {v: k for k, v in MARKET_FLAGS.items()}
    if exc.key.startswith(prefix + "."):
        key = exc.key[len(prefix) + 1 :]
        if key in from_flags and key in inv:
            return InputError(f"--{inv[key]}", exc.message)
    return exc


def emit(text: str) -> None:
    sys.stdout.write(text if text.endswith("\n") else text + "\n")
