"""One self-contained HTML report of a new dataset against the team history.

The file holds its fingerprint, the warnings about its columns, its nearest past
datasets with why, the similarity map with it placed on it, and warm-start suggestions
for every family the history has studies of (for its task). Styles and pictures are
inline; the file loads nothing from anywhere, so it can be mailed or archived.
"""

from __future__ import annotations

import os
from datetime import datetime, timezone
from html import escape
from pathlib import Path
from typing import Any

from warmstart import __version__
from warmstart.errors import BadInputError, NothingToSuggestError
from warmstart.fingerprint import Fingerprint
from warmstart.service import webview
from warmstart.service.client import query_fingerprint
from warmstart.service.maps import history_map, map_svg, write_file_atomic


def _label(data, fingerprint_of) -> str:
    source = fingerprint_of if fingerprint_of is not None else data
    return Path(source).stem if isinstance(source, (str, os.PathLike)) else "dataset"


def report(data=None, target: str | None = None, out: str | os.PathLike = "report.html", *,
           history=None, families: list[str] | None = None, k: int = 5,
           task: str | None = None, fingerprint_of=None) -> dict[str, Any]:
    """Write the HTML report of ``data`` (or of a fingerprint) to ``out``.

    Parameters
    ----------
    data : DataFrame or path, optional
        The new dataset; its rows are read here only, to fingerprint it.
    target : str
    out : path
        The HTML file to write.
    history : KnowledgeBase or Client, optional
        Default: the history at ``$WARMSTART_KB`` or ``./knowledge_base``.
    families : list of str, optional
        Families to suggest configurations for; default every family with a study of
        the dataset's task in the history.
    k : int
        Neighbours shown, and suggestions per family.
    task : str, optional
    fingerprint_of : Fingerprint or path, optional
        Use this fingerprint instead of ``data``.

    Returns
    -------
    dict
        ``out``, ``bytes``, ``neighbours``, ``families`` (each with its number of
        suggestions, or the reason there are none).
    """
    if k < 1:
        raise BadInputError("k must be at least 1")
    out = Path(out)
    if not out.parent.is_dir():
        raise BadInputError(f"cannot write the report to {out}: no directory {out.parent}")
    if history is None:
        from warmstart.history import KnowledgeBase

        history = KnowledgeBase()
    fp, label = query_fingerprint(data, target, task, fingerprint_of), _label(data, fingerprint_of)
    neighbours = history.similar(fingerprint_of=fp, k=k)
    if families is None:
        families = sorted({r["family"] for r in history.info()["by_family"]
                           if r["task"] == fp.task})
    suggestions: dict[str, list | str] = {}
    for fam in families:
        try:
            suggestions[fam] = history.suggest(fingerprint_of=fp, family=fam, k=k)
        except NothingToSuggestError as exc:
            suggestions[fam] = str(exc)
    maps, names = history_map(history)
    svg = map_svg(maps, names, query=fp, query_label=label)
    html = report_html(fp, label, history, neighbours, svg, suggestions)
    write_file_atomic(out, html.encode("utf-8"))
    return {"out": str(out), "bytes": len(html.encode("utf-8")),
            "neighbours": len(neighbours),
            "families": {f: (len(s) if isinstance(s, list) else s)
                         for f, s in suggestions.items()}}


def report_html(fp: Fingerprint, label: str, history, neighbours, svg: str,
                suggestions: dict[str, list | str]) -> str:
    """The report's HTML (see :func:`report`)."""
    when = datetime.now(timezone.utc).strftime("%Y-%m-%d %H:%M UTC")
    rows, cols = fp.values.get("rows"), fp.values.get("columns")
    head = (f"<h1>{escape(label)}</h1><p class=\"sub\">{webview.task_label(fp.task)}, "
            f"target <code>{escape(fp.target)}</code>, {webview.fmt(rows)} rows, "
            f"{webview.fmt(cols)} columns; compared with the history at "
            f"<code>{escape(str(history.path))}</code> on {when} by warmstart "
            f"{escape(__version__)}</p>")
    parts = []
    for fam, found in suggestions.items():
        inner = (webview.suggestions_table(found) if isinstance(found, list)
                 else f'<p class="note">{escape(found)}</p>')
        parts.append(f"<h3>{escape(fam)}</h3>{inner}")
    body = (head
            + webview.section("Warnings", webview.warnings_list(fp.warnings))
            + webview.section("Nearest past datasets",
                              webview.neighbours_table(neighbours, links=False))
            + webview.section("Where it sits among the history",
                              webview.figure(svg, "The star is this dataset. "
                                             + webview.MAP_CAPTION))
            + webview.section("Where to start tuning", "".join(parts) + (
                '<p class="note">Starting points only: validate the tuned model on '
                "held-out data. norm. score: 1 = best trial of its study; expected: "
                "similarity-weighted mean over the nearest datasets (* = partly "
                "predicted by surrogate models).</p>"
                if parts else '<p class="note">the history has no study of this task</p>'))
            + webview.section("Fingerprint", webview.fingerprint_tables(fp)))
    return webview.page(f"warmstart report: {label}", body, nav=False)
