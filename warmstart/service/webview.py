"""HTML of the read-only web view and of the offline report.

Every page is one self-contained document: inline CSS, inline SVG pictures drawn by
matplotlib on the server, and on the overview one small inline script (the only one,
allowed by its hash in the content security policy) that sends a fingerprint file to
``POST /api/map`` to place it on the map. Nothing is fetched from anywhere else.
Everything taken from the history is escaped.
"""

from __future__ import annotations

import base64
import hashlib
import math
from collections.abc import Iterable, Sequence
from html import escape
from typing import Any

from warmstart.fingerprint import CATALOGUE, GROUPS, Fingerprint
from warmstart.similarity import Neighbour
from warmstart.strategies import Suggestion

STYLE = """
:root { --ink:#1d2a33; --muted:#5d6b75; --line:#d9dee2; --paper:#fbfaf7;
        --cls:#2f6f9f; --reg:#c0622b; --accent:#3d7a5a; }
* { box-sizing: border-box; }
body { margin:0; font:15px/1.45 system-ui, sans-serif; color:var(--ink); background:#f3f1ec; }
header { background:var(--ink); color:#fff; padding:.7rem 1.5rem; display:flex; gap:1.5rem;
         align-items:baseline; flex-wrap:wrap; }
header .brand { font-weight:700; letter-spacing:.03em; }
header a { color:#cfe3d8; text-decoration:none; }
main { max-width:1180px; margin:0 auto; padding:1rem 1.5rem 3rem; }
section { background:var(--paper); border:1px solid var(--line); border-radius:6px;
          padding:.8rem 1.1rem 1rem; margin:1rem 0; }
h1 { font-size:1.5rem; margin:.6rem 0 .2rem; } h2 { font-size:1.15rem; margin:.2rem 0 .6rem; }
h3 { font-size:1rem; margin:1rem 0 .3rem; color:var(--muted); }
.sub { color:var(--muted); margin:0 0 .6rem; }
table { border-collapse:collapse; width:100%; font-size:.88rem; }
th, td { text-align:left; padding:.25rem .5rem; border-bottom:1px solid var(--line);
         vertical-align:top; }
th { color:var(--muted); font-weight:600; }
td.num { text-align:right; font-variant-numeric:tabular-nums; white-space:nowrap; }
.task-classification { color:var(--cls); } .task-regression { color:var(--reg); }
.figure svg { width:100%; height:auto; display:block; }
.figure.narrow svg { max-width:680px; }
.warn { color:#8a4b08; } .note { color:var(--muted); font-size:.85rem; }
code { font-size:.85em; background:#eceae4; padding:0 .25em; border-radius:3px; }
a { color:var(--accent); }
"""

PLACE_SCRIPT = """
document.getElementById('fp-file').addEventListener('change', async (ev) => {
  const status = document.getElementById('fp-status');
  const file = ev.target.files[0];
  if (!file) return;
  let fp;
  try { fp = JSON.parse(await file.text()); }
  catch (e) { status.textContent = 'not a JSON file: ' + e.message; return; }
  const resp = await fetch('/api/map', {method: 'POST',
    headers: {'Content-Type': 'application/json'},
    body: JSON.stringify({fingerprint: fp, label: file.name.replace(/\\.json$/, '')})});
  if (!resp.ok) {
    const err = await resp.json().catch(() => ({error: resp.statusText}));
    status.textContent = err.error; return;
  }
  document.getElementById('map').innerHTML = await resp.text();
  status.textContent = 'placed ' + file.name + ' (the star)';
});
"""
SCRIPT_HASH = base64.b64encode(hashlib.sha256(PLACE_SCRIPT.encode()).digest()).decode()
CONTENT_POLICY = ("default-src 'none'; style-src 'unsafe-inline'; img-src data:; "
                  f"script-src 'sha256-{SCRIPT_HASH}'; connect-src 'self'; "
                  "base-uri 'none'; form-action 'none'; frame-ancestors 'none'")


def fmt(value: Any) -> str:
    """A cell: numbers to 4 significant digits, None and NaN as a dash (escaped text)."""
    if value is None or (isinstance(value, float) and not math.isfinite(value)):
        return "-"
    if isinstance(value, bool):
        return "true" if value else "false"
    if isinstance(value, float):
        return f"{value:.3g}" if value != 0 and not 1e-3 <= abs(value) < 1e5 else f"{value:.4g}"
    if isinstance(value, dict):
        # None is a real value of a parameter here (max_depth=None), not a gap
        return ", ".join(f"{escape(str(k))}={'None' if v is None else fmt(v)}"
                         for k, v in value.items())
    if hasattr(value, "strftime"):  # a timestamp: to the minute is enough to read
        return escape(value.strftime("%Y-%m-%d %H:%M"))
    return escape(str(value))


def table(headers: Sequence[str], rows: Iterable[Sequence[Any]], numeric: str = "") -> str:
    """An HTML table; ``numeric`` has one 'r' per right-aligned column (else any letter).

    Cells that are :class:`Raw` are inserted as they are (already HTML).
    """
    head = "".join(f"<th>{escape(h)}</th>" for h in headers)
    body = []
    for row in rows:
        cells = []
        for i, c in enumerate(row):
            cls = ' class="num"' if i < len(numeric) and numeric[i] == "r" else ""
            cells.append(f"<td{cls}>{c if isinstance(c, Raw) else fmt(c)}</td>")
        body.append("<tr>" + "".join(cells) + "</tr>")
    return f"<table><thead><tr>{head}</tr></thead><tbody>{''.join(body)}</tbody></table>"


class Raw(str):
    """Text that is already HTML."""


def link(href: str, text: str) -> Raw:
    return Raw(f'<a href="{escape(href)}">{escape(text)}</a>')


def task_label(task: str) -> Raw:
    return Raw(f'<span class="task-{escape(task)}">{escape(task)}</span>')


def page(title: str, body: str, *, nav: bool = True, script: bool = False,
         refresh: int | None = None) -> str:
    """A whole HTML document around ``body``."""
    links = ('<a href="/">map</a><a href="/#datasets">datasets</a>'
             '<a href="/#families">families</a>') if nav else ""
    meta = f'<meta http-equiv="refresh" content="{int(refresh)}">' if refresh else ""
    js = f"<script>{PLACE_SCRIPT}</script>" if script else ""
    return (f'<!doctype html><html lang="en"><head><meta charset="utf-8">'
            f'<meta name="viewport" content="width=device-width, initial-scale=1">{meta}'
            f"<title>{escape(title)}</title><style>{STYLE}</style></head><body>"
            f'<header><span class="brand">warmstart</span>{links}</header>'
            f"<main>{body}</main>{js}</body></html>")


def section(title: str, inner: str, anchor: str | None = None) -> str:
    aid = f' id="{escape(anchor)}"' if anchor else ""
    return f"<section{aid}><h2>{escape(title)}</h2>{inner}</section>"


def figure(svg: str, caption: str, fid: str = "", narrow: bool = False) -> str:
    ident = f' id="{escape(fid)}"' if fid else ""
    cls = "figure narrow" if narrow else "figure"
    return (f'<div class="{cls}"{ident}>{svg}</div>'
            f'<p class="note">{escape(caption)}</p>')


MAP_CAPTION = ("Each point is a dataset of the history, one panel per task. Points are "
               "close when their meta-features are: the distances are those 'similar' "
               "uses, laid out in two dimensions by classical multidimensional scaling; "
               "r says how well the picture keeps them.")


# -- building blocks shared by the view and the report -------------------------------------
def fingerprint_tables(fp: Fingerprint) -> str:
    """The meta-features of ``fp`` by catalogue group, one table per group."""
    parts = []
    for group, values in fp.grouped().items():
        rows = [[Raw(f'<span title="{escape(CATALOGUE[n].description)}">{escape(n)}</span>'),
                 v, CATALOGUE[n].description] for n, v in values.items()]
        parts.append(f"<h3>{escape(GROUPS.get(group, group))}</h3>"
                     + table(["meta-feature", "value", "what it measures"], rows, "lr"))
    return "".join(parts)


def warnings_list(warnings: Sequence[str]) -> str:
    if not warnings:
        return '<p class="note">no warnings</p>'
    return "<ul>" + "".join(f'<li class="warn">{escape(w)}</li>' for w in warnings) + "</ul>"


def neighbours_table(neighbours: Sequence[Neighbour], links: bool = True) -> str:
    """Nearest datasets with what they agree and differ most on (this vs it)."""
    if not neighbours:
        return '<p class="note">no other dataset of this task in the history</p>'
    rows = []
    for i, n in enumerate(neighbours, 1):
        name = link(f"/datasets/{n.dataset_id}", n.name) if links else n.name
        agree = ", ".join(m for m, _, _ in n.agree)
        differ = ", ".join(f"{m} ({fmt(a)} vs {fmt(b)})" for m, a, b in n.differ) or "-"
        rows.append([i, name, n.distance, n.similarity, agree, differ])
    return table(["#", "dataset", "distance", "similarity", "agrees most on",
                  "differs most on (this vs it)"], rows, "rlrr")


def suggestions_table(suggestions: Sequence[Suggestion]) -> str:
    """Ranked starting configurations with where they come from."""
    rows = [[s.rank, s.source_name or "-", s.distance, s.normalised_score, s.score,
             Raw(fmt(s.expected_normalised) + ("*" if s.predicted else "")),
             s.expected_fit_seconds,
             Raw(fmt(s.config)) if s.config else "(estimator defaults)"] for s in suggestions]
    return table(["#", "from dataset", "distance", "norm. score", "score", "expected",
                  "est. fit s", "configuration"], rows, "rlrrrrr")


# -- the pages ------------------------------------------------------------------------------
def index_page(info: dict[str, Any], datasets: Sequence[dict[str, Any]], map_svg: str) -> str:
    """The overview: the map (with the fingerprint form), the datasets, the families."""
    summary = (f'<p class="sub">{info["datasets"]} datasets, {info["studies"]} studies, '
               f'{info["trials"]} trials; history format {info["format_version"]}; '
               "this view only reads.</p>")
    form = ('<p><label>Place a dataset on the map: a fingerprint file from '
            "<code>warmstart fingerprint DATA --target COL --json</code> "
            '<input type="file" id="fp-file" accept=".json,application/json"></label> '
            '<span id="fp-status" class="note"></span></p>')
    rows = [[link(f"/datasets/{d['dataset_id']}", d["name"]), task_label(d["task"]),
             d["rows"], d["columns"], d["studies"], ", ".join(d["families"])]
            for d in datasets]
    fams = [[link(f"/families/{r['family']}", r["family"]), task_label(r["task"]),
             r["metric"], r["studies"], r["datasets"], r["trials"]] for r in info["by_family"]]
    body = ("<h1>Team history</h1>" + summary
            + section("Similarity map", figure(map_svg, MAP_CAPTION, "map") + form, "map-view")
            + section("Datasets", table(["dataset", "task", "rows", "columns", "studies",
                                         "families"], rows, "llrrr"), "datasets")
            + section("Model families", table(["family", "task", "metric", "studies",
                                               "datasets", "trials"], fams, "lllrrr"),
                      "families"))
    return page("warmstart: team history", body, script=True)


def dataset_page(d: dict[str, Any], fp: Fingerprint, studies: Sequence[dict[str, Any]],
                 neighbours: Sequence[Neighbour], map_svg: str) -> str:
    """One dataset: its studies, nearest neighbours, place on the map, meta-features."""
    head = (f"<h1>{escape(d['name'])}</h1><p class=\"sub\">{task_label(d['task'])}, target "
            f"<code>{escape(d['target'])}</code>, id <code>{escape(d['dataset_id'])}</code>, "
            f"catalogue version {int(d['catalogue_version'])}</p>")
    rows = [[s["label"], link(f"/families/{s['family']}", s["family"]), s["metric"],
             s["better"], s["trials"], s["ok"], s["best_score"], s["source"],
             s["created_at"]] for s in studies]
    body = (head + section("Warnings", warnings_list(fp.warnings))
            + section("Studies", table(["study", "family", "metric", "better", "trials",
                                        "ok", "best score", "source", "logged"], rows,
                                       "llllrrr"))
            + section("Nearest datasets", neighbours_table(neighbours))
            + section("Where it sits", figure(map_svg, "The ringed point is this dataset. "
                                              + MAP_CAPTION))
            + section("Meta-features", fingerprint_tables(fp)))
    return page(f"warmstart: {d['name']}", body)


def _percent(share: float | None) -> str:
    return "-" if share is None else f"{100 * share:.0f}%"


def family_page(family: dict[str, Any], summary: Sequence[dict[str, Any]] | None,
                regret_svg: str | None, message: str | None,
                studies: Sequence[dict[str, Any]]) -> str:
    """One model family: backtest regret curves (or that they are being computed)."""
    head = (f"<h1>{escape(family['name'])}</h1><p class=\"sub\">"
            f"{escape(family['description'])}</p>")
    if summary is not None:
        rows = [[r["strategy"], r["k"], r["mean_regret"], r["std_regret"],
                 f"{fmt(r['q25'])} to {fmt(r['q75'])}", _percent(r.get("beats_random")),
                 _percent(r["predicted_share"])] for r in summary]
        bt = (figure(regret_svg or "", "Normalised regret of the best of the first k "
                     "suggestions on each held-out dataset: 0 = its best known trial, "
                     "1 = its median trial; lower is better. Bands: inter-quartile range.",
                     narrow=True)
              + table(["strategy", "k", "mean", "std", "IQR", "beats random",
                       "predicted lookups"], rows, "lrrrrrr"))
    elif message is not None:
        bt = f'<p class="warn">{escape(message)}</p>'
    else:
        bt = ('<p class="note">The leave-one-dataset-out backtest is being computed; '
              "this page reloads itself every 5 seconds.</p>")
    rows = [[link(f"/datasets/{s['dataset_id']}", s["dataset"]), task_label(s["task"]),
             s["metric"], s["trials"], s["best_score"]] for s in studies]
    body = (head + section("Backtest on this history", bt)
            + section("Studies", table(["dataset", "task", "metric", "trials", "best score"],
                                       rows, "lllrr")))
    return page(f"warmstart: {family['name']}", body,
                refresh=5 if summary is None and message is None else None)
