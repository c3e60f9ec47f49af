"""The evidence bundle of a run folder (``supergame report RUN_DIR``, ``supergame run --report``).

Reads the store of a finished run and writes, with :class:`sim.evidence.bundle.Bundle`, into ``RUN_DIR/report``:
a summary (what the experiment asks, its setup, the sweep, figures, the results table, the analytic
baseline, failed cells, how to reproduce every number, the model's assumptions and limitations, the
caution), the figures (PNG and PDF), the tables (CSV and LaTeX), a copy of the experiment file and a
manifest. Nothing is recomputed: every number comes from the stored cells, so the report of a run is
the same whenever it is written.

Figures are those of ``[[report.figures]]``; without them, a default set: a heatmap of each headline
metric over the first two numeric swept parameters (with the kind's analytic threshold curve) and line
plots against the swept discount factor or the first numeric parameter (with confidence bands and the
analytic prediction), one panel or line per value of the other swept parameters. Paths zipped together are one
dimension: a figure names the group once, by its lead (the first path of the group).
"""

from __future__ import annotations

import importlib
import math
import shutil
from pathlib import Path

import numpy as np

import sim.evidence.figures as figures
from sim.core.errors import InputError
from sim.core.files import symlinks_in
from sim.core.text import fmt_num
from sim.evidence.bundle import Bundle, Estimate, clear_leftovers, holds_bundle
from sim.evidence.catalogue_names import whole_number
from sim.evidence.figures import SweepData, _plt
from sim.evidence.front import (
    describe_experiment,
    headline,
    methods_rows,
    metric_column,
    parameter_column,
    scheme_words,
    software_lines,
    terms_rows,
)
from sim.evidence.render import renderer_for
from sim.evidence.views import result_names
from sim.runner.experiment import leading_comment
from sim.runner.kinds import stated_assumptions
from sim.runner.lock import FolderLock
from sim.runner.report_settings import FigureSpec, figure_name
from sim.runner.runs import (
    ARRAYS_FILE,
    CSV_FILE,
    EXPERIMENT_COPY,
    PARQUET_FILE,
    REPORT_DIR,
    SEED_RULE,
    RunFolder,
    check_manifest,
    clear_run_leftovers,
    code_notes,
    iso_time,
    sha256_file,
    write_manifest,
)
from sim.runner.store import STORE_FILE

__all__ = ["bundle_hook", "write_report"]

#: the bundle accounts of kinds whose renderers do not give one yet (kind name -> "module:function")
_BUNDLE_HOOKS: dict = {"learn": "sim.evidence.learn_bundle:bundle"}


def bundle_hook(kind):
    """The kind's own account of a run in its bundle: its renderer's ``bundle``, else a hook of this module, else
    the kind's ``report`` (plugins); None for the generic sections.

    Parameters
    ----------
    kind : sim.runner.kinds.Kind

    Returns
    -------
    callable or None
        ``hook(run, bundle) -> list of str or None``.
    """
    r = renderer_for(kind.name)
    if r is not None and r.bundle is not None:
        return r.bundle
    hook = _BUNDLE_HOOKS.get(kind.name)
    if isinstance(hook, str):
        mod, _, attr = hook.partition(":")
        hook = _BUNDLE_HOOKS[kind.name] = getattr(importlib.import_module(mod), attr)
    return hook if hook is not None else kind.report


def units_of(exp) -> tuple:
    """The experiment's currency and period (``[experiment]`` keys; None where it gives none).

    Parameters
    ----------
    exp : Experiment

    Returns
    -------
    tuple of (str or None, str or None)
    """
    t = exp.doc.get("experiment", {}) if isinstance(exp.doc.get("experiment"), dict) else {}
    return t.get("currency"), t.get("period")


def _ci(row, m) -> str:

    lo, hi = row.metrics.get(f"{m}.low", math.nan), row.metrics.get(f"{m}.high", math.nan)
    if math.isnan(lo) or math.isnan(hi):
        return "-"
    return f"[{fmt_num(lo)}, {fmt_num(hi)}]"


def _headline(exp, kind) -> list[str]:
    names = set(exp.metric_names)
    if exp.report.metrics:
        return list(exp.report.metrics)
    out = [m for m in kind.headline if m in names]
    for extra in ("deviation.gain", "deviation.pays"):
        if extra in names and extra not in out:
            out.append(extra)
    return out


def _dimensions(exp) -> list:
    """One parameter per dimension of the sweep with more than one value: a zipped group counts once, as its lead
    (the first path named) -- or, when the lead takes no numbers, its first numeric partner, so that it can be an
    axis."""
    out = []
    for g in exp.groups or [(p.path,) for p in exp.parameters]:
        ps = [exp.parameter(q) for q in g]
        if len(ps[0]) > 1:
            out.append(ps[0] if ps[0].numeric else next((p for p in ps if p.numeric), ps[0]))
    return out


def default_figures(exp, kind, data) -> list:
    """The figures drawn when the experiment names none (see the module notes).

    Parameters
    ----------
    exp : Experiment
    kind : Kind
    data : SweepData

    Returns
    -------
    list
    """

    multi = _dimensions(exp)
    numeric = [p for p in multi if p.numeric]
    heads = [m for m in kind.headline[:2] if data.has(m)]
    if data.has("deviation.gain"):
        heads.append("deviation.gain")
    out = []
    if len(numeric) >= 2:
        x, y = numeric[0], numeric[1]
        if y.path in kind.threshold and x.path not in kind.threshold:
            x, y = y, x
        rest = [p for p in multi if p.path not in (x.path, y.path)]
        if len(rest) <= 1 and (not rest or len(rest[0]) <= 12):
            facet = rest[0].path if rest else None
            for m in heads[:3]:
                thr = kind.threshold.get(x.path)
                out.append(FigureSpec("heatmap", x.path, m, y=y.path, threshold=thr if thr and data.has(thr) else None,
                                      facet=facet))
    if numeric:
        x = next((p for p in numeric if p.path in kind.threshold), numeric[0])
        rest = [p for p in multi if p.path != x.path]
        if len(rest) <= 2:
            group = rest[0].path if rest else None
            facet = rest[1].path if len(rest) > 1 else None
            if facet is not None and len(exp.parameter(facet)) > 12:
                return out
            for m in heads[:3]:
                an = kind.analytic.get(m)
                out.append(FigureSpec("line", x.path, m, analytic=an if an and data.has(an) else None, group=group,
                                      facet=facet))
    return out


def _caption(spec, units=(None, None)) -> str:
    at = "".join(f", at {_words(p, units)} = {lab}" for p, lab in spec.at)
    return _caption_body(spec, units).rstrip(".") + at + "."


def _words(key: str, units, metric: bool = False) -> str:
    """A stored name or parameter path in the catalogue's words (no unit)."""
    label = metric_column(key, units) if metric else parameter_column(key, units)
    return label.split(" [", 1)[0]


def _caption_body(spec, units=(None, None)) -> str:
    m, x = _words(spec.metric, units, True), _words(spec.x, units)
    if spec.type == "heatmap":
        c = f"The {m} in each cell of the sweep over the {x} (horizontal) and the {_words(spec.y, units)} (vertical)"
        if spec.facet:
            c += f", one panel per {_words(spec.facet, units)}"
        if spec.threshold:
            c += f"; dashed: the {_words(spec.threshold, units, True)}"
        if spec.level is not None:
            c += f"; solid: where {m} crosses {spec.level:g}"
        return c + "; numbers are the cell values."
    c = f"The {m} against the {x}"
    if spec.group:
        c += f", one line per {_words(spec.group, units)}"
    if spec.facet:
        c += f", one panel per {_words(spec.facet, units)}"
    c += "; band: 95 % confidence interval across replications where the cells report one"
    if spec.analytic:
        c += f"; dashed: the {_words(spec.analytic, units, True)}"
    return c + "."


def _draw(spec, data):

    if spec.type == "heatmap":
        return figures.heatmap(data, spec.x, spec.y, spec.metric, threshold=spec.threshold, level=spec.level,
                               facet=spec.facet, title=spec.title, at=spec.fixed())
    return figures.lines(data, spec.x, spec.metric, analytic=spec.analytic, group=spec.group, facet=spec.facet,
                         title=spec.title, at=spec.fixed())


def _single_cell_figures(b, rf, kind, row) -> None:
    """Figures of a run without a sweep: the analysis's own figures, drawn from the stored result by its renderer
    (the figures its command plots); without a renderer, from the cell's stored arrays."""
    r = renderer_for(kind.name)
    result = rf.result(row.cell) if r is not None and r.figures is not None else None
    if result is not None:
        for d in r.figures(result):
            b.figure(d.name, d.figure, d.caption)
        return
    a = row.arrays
    if "period" in a and "collusive_by_period" in a:
        plt = _plt()
        fig, ax = plt.subplots(figsize=(7, 3.8))
        ax.plot(a["period"], a["collusive_by_period"], lw=1.4, label="simulated")
        if "analytic.collusive_by_period" in a:
            ax.plot(a["period"], a["analytic.collusive_by_period"], ls="--", color="black", lw=1.2, label="analytic")
        ax.set_xlabel("period")
        ax.set_ylabel("share of replications colluding")
        ax.set_ylim(-0.02, 1.02)
        ax.grid(alpha=0.3)
        ax.legend(fontsize=8)
        fig.tight_layout()
        b.figure("collusive-share-by-period", fig, "Share of the replications still running in which every firm "
                                                   "colludes, period by period; dashed: the analytic prediction "
                                                   "where one exists.")
    if "impulse.prices" in a:
        plt = _plt()
        P = np.asarray(a["impulse.prices"], dtype=float)
        fig, ax = plt.subplots(figsize=(7, 3.8))
        for i in range(P.shape[1]):
            ax.plot(np.arange(P.shape[0]), P[:, i], marker="o", ms=3, label=f"firm {i + 1}")
        ax.axvline(1, color="black", lw=0.5)
        ax.set_xlabel("period (0: before the deviation, 1: deviation)")
        ax.set_ylabel("action (price or quantity)")
        ax.grid(alpha=0.3)
        ax.legend(fontsize=8)
        fig.tight_layout()
        b.figure("impulse-response", fig, "Impulse response: mean actions after one firm is forced to deviate for one "
                                          "period, over converged sessions.")


def _prepare_target(target: Path, default: bool) -> None:
    """Check that the bundle may be written at ``target``. A folder there must hold an earlier bundle
    (replaced at the end); the run folder's own ``report/`` that does not is left over from a write
    that was stopped (by an earlier version, or by hand), and is removed."""

    key = "folder" if default else "bundle"
    clear_leftovers(target)
    if not target.exists():
        return
    if not target.is_dir():
        raise InputError(key, f"{target} exists and is not a folder")
    if holds_bundle(target):
        return
    if default:
        shutil.rmtree(target)
        return
    raise InputError(key, f"{target} exists and does not hold an evidence bundle; choose another folder")


def write_report(folder, bundle=None, update_manifest: bool = True) -> Path:
    """Write the evidence bundle of a finished run folder (default ``RUN_DIR/report``).

    The bundle is written beside its folder and moved into place at the end (:class:`sim.evidence.bundle.Bundle`),
    so a write that is stopped leaves the earlier report, or none. A bundle inside the run folder is recorded in the
    run's manifest (unless ``update_manifest`` is false: the caller writes the manifest, and holds the folder's lock),
    which must still match every other file of the folder (:func:`sim.runner.runs.check_manifest`).

    Parameters
    ----------
    folder : path-like
        The run folder.
    bundle : path-like, optional
        Where the bundle goes instead (not inside another run folder).
    update_manifest : bool

    Returns
    -------
    Path
        The bundle's folder.
    """

    folder = Path(folder)
    target = Path(bundle) if bundle is not None else folder / REPORT_DIR
    # a report written by itself holds the folder's lock; the runner, which writes it inside a run, holds it
    # already (update_manifest=False)
    lock = FolderLock(folder, key="folder").acquire() if update_manifest and folder.is_dir() else None
    try:
        with RunFolder(folder) as rf:
            _write(rf, folder, bundle, update_manifest)
        if _inside(folder, target) and update_manifest:
            write_manifest(folder, (f"{_inside(folder, target)}/",))
    finally:
        if lock is not None:
            lock.release()
    return target


def _other_run(folder: Path, target: Path) -> Path | None:
    """The run folder, other than ``folder``, that ``target`` is or lies inside (None when there is none)."""
    here = folder.resolve()
    for p in (target.resolve(), *target.resolve().parents):
        if p != here and (p / STORE_FILE).exists():
            return p
        if p == here:
            return None
    return None


def _inside(folder: Path, target: Path) -> str | None:
    """``target`` relative to the run folder (POSIX), or None when it lies elsewhere."""
    try:
        return target.resolve().relative_to(folder.resolve()).as_posix()
    except ValueError:
        return None


def _write(rf, folder: Path, out, update_manifest: bool) -> None:

    exp = rf.experiment
    kind = exp.kind_spec()
    rows = rf.rows()
    header, body = rf.table()
    counts = rf.counts()
    attempts = rf.attempts()
    meta = rf.meta
    if counts["missing"]:
        raise InputError("folder", f"{folder} is not finished: {counts['missing']} of {counts['total']} cells have no "
                                    f"result yet; finish it with supergame run --resume {folder}")
    target = Path(out) if out is not None else folder / REPORT_DIR
    inside = _inside(folder, target)
    if inside in ("", "."):
        raise InputError("bundle", f"{target} is the run folder itself; give a folder for the bundle")
    rewritten = (f"{inside}/",) if inside else ()
    other = _other_run(folder, target)
    if other is not None:
        raise InputError("bundle", f"{target} belongs to the run folder {other}; a bundle goes into its own run folder "
                                "(the default) or outside every run folder")
    if inside:
        links = symlinks_in(folder)
        if links:
            raise InputError("folder", f"{links[0]} is a symbolic link; a run folder holds none (a write could land "
                                       "elsewhere): remove it")
    if inside and update_manifest:
        # before anything is written: every other file of the folder must be as its manifest records
        clear_run_leftovers(folder)
        check_manifest(folder, rewritten)
    _prepare_target(target, default=out is None)
    title = exp.report.title or f"{exp.name}: {kind.summary}"
    with Bundle(target, title) as b:
        _fill(b, rf, folder, exp, kind, rows, header, body, counts, attempts, meta, inside is not None
              and Path(inside).parent.as_posix() == ".")


def _promote_answer(b, question: str) -> None:
    """The answer an analysis's own account gives (a section "Answer", or its conclusion) becomes the first page's
    answer; an "Answer" section is then not repeated below it."""
    blocks = b.blocks
    for i, blk in enumerate(blocks[:-1]):
        text = blk.data.get("text", "")
        nxt = blocks[i + 1]
        if blk.kind == "heading" and (text == "Answer" or text.startswith("Conclusion")) and nxt.kind == "paragraph":
            # its own account gives its numbers, in its own words, right below
            b.headline(question, [nxt.data["text"]])
            if text == "Answer":
                del blocks[i:i + 2]
            return
    if b.front is not None:
        numbers = [x for x in b.front["numbers"] if "not available" not in x]
        answer = b.front["answer"] if numbers else ["The results of the analysis follow, section by section."]
        b.headline(question, answer, numbers)


def _cell_assumptions(kind, exp) -> list[str]:
    """The assumptions of what the run's cells use (:attr:`sim.runner.kinds.Kind.cell_assumptions`), each once."""
    if kind.cell_assumptions is None:
        return []
    out: dict = {}
    for cell in exp.cells():
        out.update(dict.fromkeys(kind.cell_assumptions(cell.doc)))
    return list(out)


def _close(b, rf, folder, exp, kind, rows, counts, attempts, meta, more, units) -> None:
    """The closing sections: failed cells, assumptions, the methods appendix (methods, software, reproducing) and
    the glossary."""

    b.heading("Failed cells")
    failed = [r for r in rows if r.status == "failed"]
    if failed:
        frows = [[r.number, "; ".join(f"{p} = {lab}" for p, lab in r.labels.items()), r.error or ""] for r in failed]
        b.table("failed", ["cell", "swept values", "error"], frows, caption=f"{len(failed)} cells failed")
    else:
        b.paragraph("None: the cell finished without error." if counts["total"] == 1
                    else f"None: all {counts['total']} cells finished without error.")
    b.assumptions(stated_assumptions(kind.assumptions, exp.metric_names) + _cell_assumptions(kind, exp) + [
        "Every number in this report is read from the stored results of the run (results.sqlite); nothing is "
        "recomputed for the report.",
    ])
    terms = terms_rows(list(exp.metric_names), [p.path for p in exp.parameters], units, _names(rf, exp, rows))
    b.heading("Methods appendix", appendix=True)
    b.paragraph("How each number of this bundle is computed, with its published source (\"common practice\" where "
                "the trade has none); the glossary below gives each number's definition.")
    b.table("methods", ["method and source", "interval", "numbers computed with it"], methods_rows(terms),
            caption="Methods and their sources", max_rows=200)
    b.heading("Software", level=3)
    b.bullets(software_lines(folder))
    b.heading("Reproducing these numbers", level=3)
    seed = meta.get("seed")
    b.bullets([
        f"Experiment file: `{EXPERIMENT_COPY}` (SHA-256 `{exp.sha256}`), copied into this bundle.",
        *_input_lines(meta.get("inputs")),
        (f"Seeds: {SEED_RULE.format(key=meta.get('seed_key'))}, with seed {seed} unless the sweep varies it. "
         "Results do not depend on the number of workers or the backend."
         if meta.get("seed_key") else "No random numbers: the kind is deterministic."),
        f"Command: `{' '.join(attempts[0].get('command') or []) if attempts else ''}`"
        + (f" (and {len(attempts) - 1} resumption{'s' if len(attempts) > 2 else ''})" if len(attempts) > 1 else ""),
        f"Started {iso_time(attempts[0]['started']) if attempts else '-'}, finished "
        f"{iso_time(max(a['finished'] or 0 for a in attempts)) if attempts else '-'} (UTC); cell compute time "
        f"{fmt_num(sum(r.seconds or 0.0 for r in rows), 1)} s in total.",
        "Software versions and platform: `manifest.json`.",
        *more,
        *[f"Note: {n}." for n in code_notes(attempts)],
    ])
    b.code(f"supergame run {EXPERIMENT_COPY}          # the same numbers, in a new run folder\n"
           f"supergame verify {folder}           # check the hashes and re-run a sample of cells")
    b.heading("Glossary", appendix=True)
    b.table("glossary", ["key", "label", "unit", "definition", "method and source", "interval"], terms,
            caption="Every number of the bundle: its stored name (key, the column name in the CSV files), label, "
                    "unit, definition, method and interval", max_rows=len(terms) + 1)


def _input_lines(recorded: dict | None) -> list[str]:
    """The files a run read besides its experiment file (:mod:`sim.runner.inputs`), for "Reproducing these numbers"."""
    if not recorded:
        return []
    files = "; ".join(f"`{name}` ({rec['key']}, SHA-256 `{rec['sha256']}`)" for name, rec in sorted(recorded.items()))
    return [f"Files read besides the experiment file (not copied into the run folder; keep them beside it, "
            f"relative to the folder the run was started in): {files}."]


def _names(rf, exp, rows) -> dict | None:
    """The firm and product names of a single finished cell's result (a sweep's cells may differ: numbers then)."""
    if exp.parameters or not rows or rows[0].status != "ok" or renderer_for(exp.kind) is None:
        return None
    try:
        return result_names(rf.result(rows[0].cell))
    except TypeError:  # a kind of a plug-in: no names
        return None


def _fill(b, rf, folder, exp, kind, rows, header, body, counts, attempts, meta, in_run_folder: bool) -> None:
    """The content of a run's evidence bundle, read from the stored rows (see the module notes)."""

    desc = exp.description or leading_comment(exp.text or "")
    units = units_of(exp)
    question = " ".join(desc.split("\n\n")[0].split()) if desc else f"{kind.summary or exp.kind}."
    question = question.split("?", 1)[0] + "?" if "?" in question else question
    b.headline(*headline(question, exp.parameters, rows, _headline(exp, kind), units))
    b.paragraph(f"Experiment `{exp.name}` (kind `{exp.kind}`), run folder `{folder.name}`; {counts['total']} cell"
                f"{'s' if counts['total'] != 1 else ''}, {counts['ok']} finished, {counts['failed']} failed.")
    more = []  # the kind's own lines on reproducing its numbers
    render = bundle_hook(kind)
    if render is not None:
        # the kind's own account of its results, read from the stored rows; the closing sections follow
        more = list(render(rf, b) or [])
        _promote_answer(b, question)
        _answer_first(b, rf, exp, rows)
        b.table("results", header, body, show=False)
        b.paragraph(f"The full results table (every metric of every cell) is `tables/results.csv` "
                    f"(also `{CSV_FILE}` in the run folder).", note=True)
    else:
        if desc:
            b.heading("What the experiment asks")
            describe_experiment(b, desc)
        b.heading("Setup")
        b.bullets(kind.describe(exp.doc) if kind.describe else [f"Kind: {exp.kind}"])
        if exp.parameters:
            b.paragraph("These are the file's settings; the values of "
                        + ", ".join(f"`{p.path}`" for p in exp.parameters) + " are those of the sweep below.",
                        note=True)
        data = SweepData(list(exp.parameters), rows, units, exp.groups)
        heads = _headline(exp, kind)
        if exp.parameters:
            b.heading("Sweep")
            prow = [[parameter_column(p.path, units), ", ".join(p.labels), len(p)] for p in exp.parameters]
            b.table("sweep", ["parameter", "values", "number"], prow, caption="Swept parameters")
            groups = [" + ".join(g) for g in exp.groups if len(g) > 1]
            how = "Every combination of the values (grid)" if exp.mode == "grid" else "Values taken together (zip)"
            b.paragraph(how
                        + (f"; varying together: {'; '.join(groups)}" if groups and exp.mode == "grid" else "")
                        + f"; {exp.n_cells} cells. Each cell is one complete {exp.kind} run with the other settings of "
                          "the file.")

        b.heading("Results")
        specs = list(exp.report.figures) or default_figures(exp, kind, data)

        for i, spec in enumerate(specs):
            if not data.has(spec.metric):
                b.paragraph(f"Figure of {spec.metric} not drawn: no finished cell reports it.", note=True)
                continue
            b.figure(figure_name(spec, i), _draw(spec, data), _caption(spec, data.units))
        if not exp.parameters and rows and rows[0].status == "ok":
            _single_cell_figures(b, rf, kind, rows[0])

        if exp.parameters:
            _sweep_table(b, exp, rows, heads, units)
        elif rows and rows[0].status == "ok":
            _cell_table(b, exp, kind, rows[0], units)
        b.table("results", header, body, show=False)
        b.paragraph(f"The full results table (every metric of every cell) is `tables/results.csv` "
                    f"(also `{CSV_FILE}` in the run folder).", note=True)

        _analytic_baseline(b, rows)
        _answer_first(b, rf, exp, rows)

    _close(b, rf, folder, exp, kind, rows, counts, attempts, meta, more, units)
    _write_with_manifest(b, folder, exp, rows, counts, attempts, meta, in_run_folder)


def _answer_first(b, rf, exp, rows) -> None:
    """A single cell's answer on the first page starts with its renderer's headline (the first line of the
    command's terminal report: one wording in both places). It replaces the answer's first sentence -- the generic
    one on the first headline metric (:func:`sim.evidence.front.headline`), or the conclusion an analysis's own
    account promoted, which its section below still gives -- and the answer's further sentences follow it."""
    r = renderer_for(exp.kind)
    if exp.parameters or b.front is None or r is None or r.headline is None or not rows or rows[0].status != "ok":
        return
    head = r.headline(rf.result(rows[0].cell))
    rest = [a for a in b.front["answer"][1:] if a != head]
    b.headline(b.front["question"], [head, *rest], b.front["numbers"], b.front["heading"])


def _sweep_table(b, exp, rows, heads, units) -> None:
    """The headline metrics of every cell of a sweep, with their intervals."""
    hdr = ["cell", *[parameter_column(p.path, units) for p in exp.parameters]]
    disp_rows, csv_rows = [], []
    # the CSV keeps the stored names, so that it joins with results.csv (the glossary gives their labels)
    csv_hdr = ["cell", *[p.path for p in exp.parameters]]
    for m in heads:
        ci = any(f"{m}.low" in r.metrics for r in rows)
        hdr.append(metric_column(m, units) + (" and 95 % interval" if ci else ""))
        csv_hdr += [m, f"{m}.low", f"{m}.high"] if ci else [m]
    for r in rows:
        # the page shows a swept value as the experiment file writes it ("0.5", not "0.5000"); the CSV keeps numbers
        labels = [r.labels[p.path] if not p.numeric else r.params[p.path] for p in exp.parameters]
        d, c = [r.number, *[r.labels[p.path] for p in exp.parameters]], [r.number, *labels]
        for m in heads:
            v = r.metrics.get(m, math.nan)
            c.append(v)
            if any(f"{m}.low" in q.metrics for q in rows):
                lo, hi = r.metrics.get(f"{m}.low", math.nan), r.metrics.get(f"{m}.high", math.nan)
                d.append(Estimate(v, lo, hi))
                c += [lo, hi]
            else:
                d.append(_shown(m, v))
        disp_rows.append(d)
        csv_rows.append(c)
    b.table("summary", hdr, disp_rows, caption="Headline results per cell", csv_rows=(csv_hdr, csv_rows),
            note="95 % confidence intervals across replications (simulation error only)")


def _shown(m: str, v):
    """A metric's value as a table shows it: a whole number (a count, a firm's number, a yes/no) without decimals."""
    if isinstance(v, float) and math.isfinite(v) and v == round(v) and whole_number(m):
        return int(v)
    return v


def _cell_table(b, exp, kind, r, units) -> None:
    """Every metric of a run of one cell, beside its analytic prediction."""
    names = [m for m in exp.metric_names if not m.endswith((".se", ".low", ".high")) and not
             m.startswith("analytic.")] or sorted(r.metrics)
    mrows = []
    for m in names:
        an = kind.analytic.get(m)
        mrows.append([metric_column(m, units), _shown(m, r.metrics.get(m, math.nan)), _ci(r, m),
                      _shown(m, r.metrics.get(an, math.nan)) if an else math.nan])
    mapped = set(kind.analytic.values())
    for m in exp.metric_names:
        if m.startswith("analytic.") and m not in mapped and math.isfinite(r.metrics.get(m, math.nan)):
            mrows.append([metric_column(m, units), _shown(m, r.metrics[m]), "-", math.nan])
    b.table("summary", ["quantity [unit]", "value", "95 % interval", "analytic prediction"], mrows,
            caption="Results", max_rows=200,
            note="rows named analytic: the analytic baseline of the cell (closed forms and benchmarks)")


def _analytic_baseline(b, rows) -> None:
    """The critical discount factors of the schemes played, when the cells report them."""
    ok_rows = [r for r in rows if r.status == "ok"]
    crit = sorted({m for r in ok_rows for m in r.metrics if m.startswith("analytic.critical_delta.")})
    if crit and ok_rows:
        b.heading("Analytic baseline")
        trows = []
        varies = False
        for m in crit:
            have = [r for r in ok_rows if m in r.metrics]
            vals = {round(r.metrics[m], 12) for r in have if math.isfinite(r.metrics[m])}
            v = have[0].metrics[m]
            varies = varies or len(vals) > 1
            trows.append([scheme_words(m.split(".", 2)[2]),
                          v if math.isfinite(v) else "not sustainable below one"])
        b.table("analytic-baseline", ["punishment scheme", "critical discount factor"], trows,
                caption="Critical discount factors of the punishment schemes played (perfect monitoring, infinite "
                        "horizon)",
                note=("values of the first cell playing each scheme; they vary across cells (see the results "
                      "table)" if varies else "the same in every cell playing the scheme"))


def _write_with_manifest(b, folder, exp, rows, counts, attempts, meta, in_run_folder: bool) -> None:
    """Attach the experiment file and write the bundle with its manifest."""
    seed = meta.get("seed")
    b.attach(EXPERIMENT_COPY, (folder / EXPERIMENT_COPY).read_bytes())
    data_files = {}
    if in_run_folder:
        for rel in (STORE_FILE, CSV_FILE, PARQUET_FILE, ARRAYS_FILE):
            if (folder / rel).is_file():
                data_files[f"../{rel}"] = sha256_file(folder / rel)
    b.write(manifest={
        "experiment": {"file": EXPERIMENT_COPY, "sha256": exp.sha256, "name": exp.name, "kind": exp.kind,
                       "source": meta.get("source")},
        "command": attempts[0].get("command") if attempts else None,
        "attempts": [{"started": iso_time(a["started"]), "finished": iso_time(a["finished"]), "outcome": a["outcome"],
                      "command": a.get("command"), "backend": a.get("backend")} for a in attempts],
        "started": iso_time(attempts[0]["started"]) if attempts else None,
        "finished": iso_time(max(a["finished"] or 0 for a in attempts)) if attempts else None,
        "seeds": {"experiment_seed": seed, "seed_key": meta.get("seed_key"),
                  "cells": [[r.number, r.seed] for r in rows] if len(rows) <= 10_000 else None},
        "cells": {"total": counts["total"], "ok": counts["ok"], "failed": counts["failed"]},
        "run_data": data_files,
    })
