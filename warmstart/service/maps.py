"""The similarity map: the history's datasets in two dimensions, and its picture.

Distances. Exactly those of ``similar`` (:mod:`warmstart.similarity`): for each task on
its own (``similar`` never compares across tasks), meta-features are scaled robustly over
that task's datasets, differences are clipped at ``CLIP`` and the distance is the
root-mean-square over the meta-features both sides define. Two datasets sharing no
meta-feature are put at ``CLIP``, the largest distance clipping allows.

Embedding. Classical (Torgerson) multidimensional scaling: with ``D2`` the squared
distances and ``J = I - 11'/n`` the centring matrix, ``B = -J D2 J / 2`` and the
coordinates are the top eigenvectors of ``B`` times the square roots of their eigenvalues
(Torgerson 1952; Gower 1966). A point that is not part of the fit (the query, or the
datasets beyond the landmarks) is placed from its squared distances ``d2`` to the fitted
points by ``x = Λ^(-1/2) V' (μ - d2) / 2``, ``μ`` the column means of ``D2``; on a fitted
point it gives back that point's coordinates (de Silva & Tenenbaum 2004, landmark MDS).
Histories of more than ``LANDMARKS`` datasets of a task are fitted on that many
landmarks chosen by farthest-point sampling (deterministic: it starts from the smallest
dataset id), so the cost grows linearly with the number of datasets.

Pictures are matplotlib SVG (or PNG) drawn on the server or offline; in SVG output each
dataset's marker carries ``data-dataset``, ``data-name`` and ``data-task`` attributes
and a tooltip, so pages and tests can find them.
"""

from __future__ import annotations

import io
import os
import re
import xml.etree.ElementTree as ET
from collections.abc import Mapping
from dataclasses import dataclass
from pathlib import Path
from typing import Any

import numpy as np

from warmstart.errors import BadInputError
from warmstart.fingerprint import CATALOGUE, Fingerprint
from warmstart.similarity import CLIP, IGNORED, Scaler, distances, fit_scaler, matrix

LANDMARKS = 400
CHUNK_ELEMENTS = 4_000_000  # difference-array elements per block (32 MB of float64)
TASK_COLOURS = {"classification": "#2f6f9f", "regression": "#c0622b"}
QUERY_COLOUR = "#111111"
LABEL_MAX = 45  # name the points on panels with at most this many datasets
SVG_NS = "http://www.w3.org/2000/svg"
XLINK_NS = "http://www.w3.org/1999/xlink"
ET.register_namespace("", SVG_NS)
ET.register_namespace("xlink", XLINK_NS)


# -- distances and embedding ------------------------------------------------------------
def pairwise_distances(A: np.ndarray, B: np.ndarray) -> np.ndarray:
    """Distances between the rows of two scaled matrices, as ``similar`` computes them.

    Parameters
    ----------
    A : ndarray of shape (n_a, n_features), scaled, NaN where undefined
    B : ndarray of shape (n_b, n_features), scaled, NaN where undefined

    Returns
    -------
    ndarray of shape (n_a, n_b)
        Root-mean-square of the clipped differences over the meta-features both rows
        define; ``CLIP`` where they share none.
    """
    A, B = np.asarray(A, dtype=float), np.asarray(B, dtype=float)
    out = np.empty((A.shape[0], B.shape[0]))
    step = max(1, CHUNK_ELEMENTS // max(1, B.shape[0] * max(1, B.shape[1])))
    for lo in range(0, A.shape[0], step):
        block = A[lo:lo + step]
        diffs = np.minimum(np.abs(block[:, None, :] - B[None, :, :]), CLIP)
        out[lo:lo + step] = distances(diffs.reshape(-1, B.shape[1])).reshape(len(block), -1)
    return np.where(np.isfinite(out), out, CLIP)


@dataclass(frozen=True)
class Embedding:
    """A classical MDS fit.

    Attributes
    ----------
    coords : ndarray of shape (n, n_components)
        Coordinates of the fitted points.
    vectors : ndarray of shape (n, n_components)
        Unit eigenvectors of the double-centred matrix (sign fixed so that each
        vector's largest entry in absolute value is positive).
    values : ndarray of shape (n_components,)
        Their eigenvalues, clipped at 0 (a non-positive one gives a flat axis).
    mean_sq : ndarray of shape (n,)
        Column means of the squared distances.
    """

    coords: np.ndarray
    vectors: np.ndarray
    values: np.ndarray
    mean_sq: np.ndarray

    def place(self, dist: np.ndarray) -> np.ndarray:
        """Coordinates of new points from their distances to the fitted points.

        Parameters
        ----------
        dist : ndarray of shape (m, n)

        Returns
        -------
        ndarray of shape (m, n_components)
        """
        d2 = np.atleast_2d(np.asarray(dist, dtype=float)) ** 2
        with np.errstate(divide="ignore", invalid="ignore"):
            inv = np.where(self.values > 0, 1.0 / np.sqrt(self.values), 0.0)
        return 0.5 * (self.mean_sq[None, :] - d2) @ self.vectors * inv[None, :]


def classical_mds(D: np.ndarray, n_components: int = 2) -> Embedding:
    """Classical MDS of a symmetric distance matrix ``D`` of shape (n, n).

    Eigendecomposition of ``B = -J D² J / 2`` (numpy ``eigh``); see the module docstring.
    """
    D = np.asarray(D, dtype=float)
    if D.ndim != 2 or D.shape[0] != D.shape[1]:
        raise BadInputError("classical MDS needs a square distance matrix")
    n = D.shape[0]
    D2 = D ** 2
    mean_sq = D2.mean(axis=0)
    # -J D2 J / 2 without forming J: subtract row and column means, add the grand mean
    B = -0.5 * (D2 - mean_sq[None, :] - mean_sq[:, None] + mean_sq.mean())
    values, vectors = np.linalg.eigh((B + B.T) / 2)
    order = np.argsort(values)[::-1][:n_components]
    values, vectors = np.maximum(values[order], 0.0), vectors[:, order]
    if vectors.shape[1] < n_components:  # fewer points than dimensions
        pad = n_components - vectors.shape[1]
        vectors = np.hstack([vectors, np.zeros((n, pad))])
        values = np.concatenate([values, np.zeros(pad)])
    top = np.abs(vectors).argmax(axis=0)
    vectors = vectors * np.where(vectors[top, np.arange(n_components)] < 0, -1.0, 1.0)
    return Embedding(vectors * np.sqrt(values)[None, :], vectors, values, mean_sq)


def farthest_points(X: np.ndarray, m: int) -> tuple[np.ndarray, np.ndarray]:
    """Choose ``m`` landmark rows of the scaled matrix ``X`` by farthest-point sampling.

    Starts from row 0 and adds, each time, the row farthest from those chosen.

    Returns
    -------
    landmarks : ndarray of shape (m,) of int
    dist : ndarray of shape (m, n)
        Distances from each landmark to every row (computed on the way).
    """
    n = X.shape[0]
    m = min(m, n)
    chosen = np.zeros(m, dtype=int)
    dist = np.empty((m, n))
    nearest_d = np.full(n, np.inf)
    for i in range(m):
        dist[i] = pairwise_distances(X[chosen[i]][None, :], X)[0]
        nearest_d = np.minimum(nearest_d, dist[i])
        if i + 1 < m:
            nearest_d[chosen[:i + 1]] = -1.0
            chosen[i + 1] = int(np.argmax(nearest_d))
    return chosen, dist


# -- the map of one history --------------------------------------------------------------
@dataclass(frozen=True)
class TaskMap:
    """The map of one task's datasets.

    Attributes
    ----------
    task : str
    ids : list of str
        Dataset ids, sorted; row order of ``coords``.
    coords : ndarray of shape (n, 2)
    scaler : Scaler
        The scaling ``similar`` would fit on these datasets.
    landmark_rows : ndarray of shape (n_landmarks, n_features)
        Scaled values of the landmarks, to place new points.
    embedding : Embedding
        The MDS fit on the landmarks.
    kept : float
        Pearson correlation between map distances and meta-feature distances among the
        landmarks (1 = the picture keeps every distance's order and ratio).
    """

    task: str
    ids: list[str]
    coords: np.ndarray
    scaler: Scaler
    landmark_rows: np.ndarray
    embedding: Embedding
    kept: float

    def distances_to(self, fp: Fingerprint) -> np.ndarray:
        """Distances from ``fp`` to the landmarks, shape (n_landmarks,)."""
        q = self.scaler.transform(matrix([fp], self.scaler.names))
        return pairwise_distances(q, self.landmark_rows)[0]

    def place(self, fp: Fingerprint) -> np.ndarray:
        """Where ``fp`` falls on this map, shape (2,)."""
        return self.embedding.place(self.distances_to(fp)[None, :])[0]


def task_map(task: str, fingerprints: Mapping[str, Fingerprint],
             landmarks: int = LANDMARKS) -> TaskMap:
    """Build the map of one task's datasets (all of ``fingerprints`` are of ``task``)."""
    ids = sorted(fingerprints)
    fps = [fingerprints[i] for i in ids]
    seen: set[str] = set().union(*(fp.values for fp in fps)) if fps else set()
    # catalogue order first, then any name a newer catalogue added
    names = [n for n in CATALOGUE if n in seen and n not in IGNORED]
    names += sorted(seen - set(names) - IGNORED)
    scaler = fit_scaler(matrix(fps, names), names)
    X = scaler.transform(matrix(fps, names))
    if len(ids) <= landmarks:
        rows = np.arange(len(ids))
        D = pairwise_distances(X, X)
        emb = classical_mds(D)
        coords, D_land = emb.coords, D
    else:
        rows, dist = farthest_points(X, landmarks)
        D_land = dist[:, rows]
        emb = classical_mds(D_land)
        coords = emb.place(dist.T)
    kept = _kept(D_land, emb.coords)
    return TaskMap(task, ids, coords, scaler, X[rows], emb, kept)


def _kept(D: np.ndarray, coords: np.ndarray) -> float:
    if D.shape[0] < 3:
        return 1.0
    iu = np.triu_indices(D.shape[0], 1)
    diff = coords[:, None, :] - coords[None, :, :]
    flat = np.sqrt((diff ** 2).sum(-1))[iu]
    if np.std(flat) == 0 or np.std(D[iu]) == 0:
        return float("nan")
    return float(np.corrcoef(D[iu], flat)[0, 1])


def similarity_map(fingerprints: Mapping[str, Fingerprint],
                   landmarks: int = LANDMARKS) -> dict[str, TaskMap]:
    """One :class:`TaskMap` per task present in ``fingerprints`` (dataset id -> Fingerprint)."""
    by_task: dict[str, dict[str, Fingerprint]] = {}
    for did, fp in fingerprints.items():
        by_task.setdefault(fp.task, {})[did] = fp
    return {t: task_map(t, by_task[t], landmarks) for t in sorted(by_task)}


# -- the picture ---------------------------------------------------------------------------
def _short_names(names: list[str]) -> list[str]:
    """Drop a prefix every name shares up to a separator (``team-churn`` -> ``churn``)."""
    if len(names) < 2:
        return names
    prefix = os.path.commonprefix(names)
    cut = max(prefix.rfind("-"), prefix.rfind("_"), prefix.rfind(" "))
    return [n[cut + 1:] or n for n in names] if cut >= 0 else names


def draw(maps: Mapping[str, TaskMap], names: Mapping[str, str], *,
         query: Fingerprint | None = None, query_label: str = "query",
         highlight: str | None = None, title: str | None = None):
    """Draw the map as a matplotlib figure (one panel per task); returns the figure.

    Each task's markers are one scatter collection whose SVG group id is
    ``points-<task>``; the query is a star.
    """
    plt = _pyplot()
    tasks = list(maps) or ["classification"]
    fig, axes = plt.subplots(1, len(tasks), figsize=(5.6 * len(tasks), 5.0), squeeze=False)
    for ax, task in zip(axes[0], tasks):
        tm = maps.get(task)
        ax.set_xticks([])
        ax.set_yticks([])
        ax.set_facecolor("#fbfaf7")
        if tm is None or not tm.ids:
            ax.set_title("no datasets yet", fontsize=10)
            continue
        n = len(tm.ids)
        size = 34 if n <= 200 else max(2.0, 3000.0 / n)
        sc = ax.scatter(tm.coords[:, 0], tm.coords[:, 1], s=size, c=TASK_COLOURS.get(
            task, "#666666"), alpha=0.85 if n <= 200 else 0.5, linewidths=0, label=task)
        sc.set_gid(f"points-{task}")
        if n <= LABEL_MAX:
            for (x, y), label in zip(tm.coords, _short_names([names.get(i, i)
                                                              for i in tm.ids])):
                ax.annotate(label, (x, y), xytext=(4, 3), textcoords="offset points",
                            fontsize=6.5, color="#444444", parse_math=False)
        if highlight in tm.ids:
            x, y = tm.coords[tm.ids.index(highlight)]
            ax.scatter([x], [y], s=170, facecolors="none", edgecolors=QUERY_COLOUR,
                       linewidths=1.4)
        if query is not None and query.task == task:
            qx, qy = tm.place(query)
            star = ax.scatter([qx], [qy], s=240, marker="*", c=QUERY_COLOUR, zorder=5)
            star.set_gid("query")
            ax.annotate(query_label, (qx, qy), xytext=(7, -10), textcoords="offset points",
                        fontsize=8, fontweight="bold", parse_math=False)
        kept = "" if not np.isfinite(tm.kept) else f"; distances kept r = {tm.kept:.2f}"
        ax.set_title(f"{task}: {n} datasets{kept}", fontsize=10,
                     color=TASK_COLOURS.get(task, "#333333"))
    fig.suptitle(title or "datasets by meta-feature distance (classical MDS)", fontsize=11)
    fig.tight_layout()
    return fig


def _pyplot():
    try:
        import matplotlib

        matplotlib.use("Agg")
        import matplotlib.pyplot as plt
    except ImportError:
        raise BadInputError("drawing the map needs matplotlib; install it with "
                            "pip install 'warmstart[plot]'") from None
    return plt


def figure_svg(fig, salt: str = "warmstart") -> str:
    """The figure as SVG text (no XML prologue, no date, ids stable for a given salt)."""
    import matplotlib

    plt = _pyplot()
    buf = io.StringIO()
    try:
        with matplotlib.rc_context({"svg.hashsalt": salt, "svg.fonttype": "none"}):
            fig.savefig(buf, format="svg", metadata={"Date": None})
    finally:
        plt.close(fig)
    text = buf.getvalue()
    return text[text.index("<svg"):]


def annotate_points(svg: str, maps: Mapping[str, TaskMap], names: Mapping[str, str],
                    link: str | None = None) -> str:
    """Give each dataset marker of ``svg`` (from :func:`draw`) data attributes and a tooltip.

    ``link``, when given, is a format string with ``{id}`` wrapping each marker in a link.
    """
    root = ET.fromstring(svg)
    parents = {child: parent for parent in root.iter() for child in parent}
    for task, tm in maps.items():
        group = next((g for g in root.iter(f"{{{SVG_NS}}}g")
                      if g.get("id") == f"points-{task}"), None)
        if group is None:
            continue
        marks = [e for e in _marks(group)]
        for did, mark in zip(tm.ids, marks):
            mark.set("data-dataset", did)
            mark.set("data-name", names.get(did, did))
            mark.set("data-task", task)
            tip = ET.SubElement(mark, f"{{{SVG_NS}}}title")
            tip.text = f"{names.get(did, did)} ({task})"
            if link is not None:
                parent = parents[mark]
                pos = list(parent).index(mark)
                anchor = ET.Element(f"{{{SVG_NS}}}a", {"href": link.format(id=did)})
                parent.remove(mark)
                anchor.append(mark)
                parent.insert(pos, anchor)
    return ET.tostring(root, encoding="unicode")


def _marks(group: ET.Element):
    """The marker elements of a scatter group, in drawing order (definitions skipped)."""
    for child in group:
        tag = child.tag.rsplit("}", 1)[-1]
        if tag == "defs":
            continue
        if tag in ("use", "path"):
            yield child
        elif tag == "g":
            yield from _marks(child)


def map_svg(maps: Mapping[str, TaskMap], names: Mapping[str, str], *,
            query: Fingerprint | None = None, query_label: str = "query",
            highlight: str | None = None, link: str | None = None) -> str:
    """The map as annotated SVG text, ready to inline in a page."""
    fig = draw(maps, names, query=query, query_label=query_label, highlight=highlight)
    svg = annotate_points(figure_svg(fig, salt="map"), maps, names, link)
    # ElementTree writes ns0-free markup already; drop the fixed pixel size so CSS scales it
    return re.sub(r'(<svg[^>]*?) width="[^"]+" height="[^"]+"', r"\1", svg, count=1)


def history_map(history) -> tuple[dict[str, TaskMap], dict[str, str]]:
    """The maps and dataset names of a history (a ``KnowledgeBase`` or a ``Client``)."""
    datasets = history.tables()["datasets"]
    names = dict(zip(datasets["dataset_id"], datasets["name"]))
    return similarity_map(history.fingerprints(datasets)), names


def map(history, out: str | os.PathLike, *,
        query: Fingerprint | None = None, query_label: str = "query") -> dict[str, Any]:
    """Write the similarity map of ``history`` to ``out`` (``.svg`` or ``.png``).

    Parameters
    ----------
    history : KnowledgeBase or Client
    out : path
        The picture's file; its suffix picks the format.
    query : Fingerprint, optional
        A dataset to place on the map (a star on its task's panel).

    Returns
    -------
    dict
        ``out``, ``datasets`` per task and, with a query, its coordinates.
    """
    out = Path(out)
    fmt = out.suffix.lower().lstrip(".")
    if fmt not in ("svg", "png"):
        raise BadInputError(f"the map's file must end in .svg or .png, not {out.name!r}")
    if not out.parent.is_dir():
        raise BadInputError(f"cannot write the map to {out}: no directory {out.parent}")
    maps, names = history_map(history)
    if fmt == "svg":
        data = map_svg(maps, names, query=query, query_label=query_label).encode()
    else:
        fig = draw(maps, names, query=query, query_label=query_label)
        buf = io.BytesIO()
        try:
            fig.savefig(buf, format="png", dpi=130, metadata={"Software": None})
        finally:
            _pyplot().close(fig)
        data = buf.getvalue()
    write_file_atomic(out, data)
    info: dict[str, Any] = {"out": str(out), "datasets": {t: len(m.ids) for t, m in
                                                          maps.items()}}
    if query is not None and query.task in maps:
        info["query"] = {"task": query.task,
                         "position": [float(v) for v in maps[query.task].place(query)]}
    return info


def write_file_atomic(path: Path, data: bytes) -> None:
    """Write ``data`` to ``path`` through a temporary file and a rename."""
    tmp = path.with_name(f".{path.name}.tmp-{os.getpid()}")
    try:
        tmp.write_bytes(data)
        os.replace(tmp, path)
    except OSError as exc:
        tmp.unlink(missing_ok=True)
        raise BadInputError(f"cannot write {path}: {exc.strerror}") from None


__all__ = ["Embedding", "TaskMap", "classical_mds", "draw", "farthest_points", "history_map",
           "map", "map_svg", "pairwise_distances", "similarity_map", "task_map"]
