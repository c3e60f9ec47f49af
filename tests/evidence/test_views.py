"""Results in a notebook: ``to_frame()`` has one row per stored number (the kind's own flat metrics, the numbers of
``--json``), labelled from the catalogue with the key last; ``_repr_html_()`` is well-formed HTML with the labels,
the answer and the caution, shows no stored name outside its key column, and escapes firm names."""

from __future__ import annotations

import math
import tomllib
from html.parser import HTMLParser

import pytest

from sim.core.text import CAUTION
from sim.evidence.catalogue import describe
from sim.evidence.render import renderer_for
from sim.evidence.views import COLUMNS
from sim.runner.analyses.assess import assessment_metrics
from sim.runner.analyses.capacity import capacity_metrics
from sim.runner.analyses.learn import learn_metrics
from sim.runner.analyses.simulate import simulate_metrics
from sim.runner.analyses.thresholds import threshold_metrics
from sim.runner.analyses.tournament import tournament_metrics
from sim.runner.single import run_single
from tests.cli.test_cli_answers import ASSESS_QUICK, DEMO
from tests.cli.test_cli_capacity import DUOPOLY
from tests.cli.test_cli_learn import SMALL as LEARN
from tests.cli.test_cli_simulate import SMALL as SIMULATE
from tests.cli.test_cli_tournament import BASE as TOURNAMENT

HOSTILE = ["<script>alert(1)</script>", "A & B <i>"]
# the assessment's firms renamed with markup; the merging pair keeps its order
HOSTILE_ASSESS = ASSESS_QUICK.replace('"Firm B"', '"Firm <B> & Co"').replace('"Firm C"', '"<C>"')
# the capacity duopoly with its firms named with markup (and a merger's names are not needed)
HOSTILE_CAPACITY = DUOPOLY.replace("cost = 0.0", f"cost = 0.0\nnames = {HOSTILE!r}".replace("'", '"'))

#: kind -> (experiment text, flat metrics of its result, (key, reading of the same number in --json))
CASES = {
    "thresholds": (DEMO.read_text(), threshold_metrics,
                   ("threshold.grim", lambda j: j["thresholds"]["grim"]["market"])),
    "simulate": (SIMULATE, simulate_metrics, ("collusive_share", lambda j: j["metrics"]["collusive_share"]["value"])),
    "learn": (LEARN, learn_metrics, ("profit_gain", lambda j: j["summary"]["profit_gain"]["mean"])),
    "tournament": (TOURNAMENT, tournament_metrics,
                   ("profit_gain.grim", lambda j: next(r["profit_gain"]["value"] for r in j["rules"]
                                                       if r["label"] == "grim"))),
    "assess": (HOSTILE_ASSESS, assessment_metrics, ("threshold.before", lambda j: j["conclusion"]["threshold_before"])),
    "capacity": (HOSTILE_CAPACITY, capacity_metrics,
                 ("threshold.grim", lambda j: j["thresholds"]["collusion"]["grim_market"])),
}


@pytest.fixture(scope="module")
def results():
    return {kind: run_single(tomllib.loads(text)).result for kind, (text, _, _) in CASES.items()}


class _Cells(HTMLParser):
    """The text inside the key column and the text everywhere else."""

    def __init__(self):
        super().__init__()
        self.key_depth, self.keys, self.other = 0, [], []

    def handle_starttag(self, tag, attrs):
        if tag == "td" and ("class", "key") in attrs:
            self.key_depth = 1
        self.tags = getattr(self, "tags", 0) + 1

    def handle_endtag(self, tag):
        if tag == "td":
            self.key_depth = 0

    def handle_data(self, data):
        (self.keys if self.key_depth else self.other).append(data)


def _same(a, b) -> bool:
    a, b = float("nan") if a is None else float(a), float("nan") if b is None else float(b)
    return (math.isnan(a) and math.isnan(b)) or a == b


@pytest.mark.parametrize("kind", list(CASES))
def test_frame_has_one_row_per_stored_number_labelled_from_the_catalogue(results, kind):
    res = results[kind]
    _, flat, (key, from_json) = CASES[kind]
    metrics = flat(res)
    df = res.to_frame()
    assert list(df.columns) == COLUMNS and COLUMNS[-1] == "key"
    numbers = [k for k in metrics if not k.endswith((".low", ".high", ".se"))]
    assert list(df.key) == numbers
    for row in df.itertuples(index=False):
        assert _same(row.value, metrics[row.key])
        assert _same(row.low, metrics.get(f"{row.key}.low")) and _same(row.high, metrics.get(f"{row.key}.high"))
        # a stored name with a dot or an underscore never stands as its own label
        assert row.label and (row.label != row.key or not any(c in row.key for c in "._"))
    # the same number as the command's --json document
    doc = renderer_for(kind).as_json(res)
    assert _same(df.set_index("key").loc[key, "value"], from_json(doc))
    # labels and units are the catalogue's
    plain = df[df.key == key].iloc[0]
    d = describe(key)
    assert plain.label == d.label and plain.unit == d.unit


@pytest.mark.parametrize("kind", list(CASES))
def test_html_is_well_formed_labelled_and_shows_no_stored_name_outside_its_column(results, kind):
    res = results[kind]
    page = res._repr_html_()
    p = _Cells()
    p.feed(page)
    p.close()
    other = " ".join(p.other)
    df = res.to_frame()
    assert p.keys == list(df.key)
    for label in df.label:
        assert label in p.other
    assert renderer_for(kind).headline(res) in other and CAUTION in other
    # a stored name with a dot or an underscore is an internal key: only its own column shows it
    internal = [k for k in df.key if "." in k or "_" in k]
    assert internal and not [k for k in internal if k in other]
    assert page.count("<tr>") == len(df) + 1 and page.count("</tr>") == len(df) + 1


@pytest.mark.parametrize("kind, names", [("assess", ["Firm <B> & Co", "<C>"]), ("capacity", HOSTILE)])
def test_html_escapes_firm_names(results, kind, names):
    page = results[kind]._repr_html_()
    p = _Cells()
    p.feed(page)
    text = " ".join(p.other)
    for name in names:
        assert name not in page  # never as markup
        assert name in text  # read back as text
    assert "<script>" not in page and "<B>" not in page and "<i>" not in page


def test_a_record_without_a_view_has_no_html_and_no_frame():
    from dataclasses import dataclass

    from sim.core.records import Record

    @dataclass(frozen=True)
    class Plain(Record):
        x: float

    assert Plain(1.0)._repr_html_() is None
    with pytest.raises(TypeError, match="no table view"):
        Plain(1.0).to_frame()
