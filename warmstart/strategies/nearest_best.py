"""Nearest-best: the best trials of the nearest past datasets.

The nearest-neighbour warm start of Feurer, Springenberg & Hutter (AAAI 2015): rank the
past datasets by meta-feature distance and take the best configuration found on each.
Here the list is filled round by round: the best trial of every neighbour in order of
distance, then the second best of each, and so on, skipping configurations already
listed. A dataset identical to the query (distance 0) therefore always contributes the
first suggestion, its best trial.
"""

from __future__ import annotations

from warmstart.spaces import config_key
from warmstart.strategies.base import SuggestContext, Suggestion


class NearestBest:
    name = "nearest-best"
    description = "best trials of the nearest datasets, round-robin by distance"

    def propose(self, ctx: SuggestContext, k: int) -> list[Suggestion]:
        study_meta = ctx.studies.set_index("study_id")
        per_dataset = []
        for nb in ctx.neighbours:
            sids = ctx.studies.loc[ctx.studies["dataset_id"] == nb.dataset_id, "study_id"]
            t = ctx.trials[ctx.trials["study_id"].isin(sids)]
            # best first; ties broken by raw score then by study and trial order
            t = t.sort_values(["normalised", "study_id", "trial_index"],
                              ascending=[False, True, True], kind="stable")
            per_dataset.append((nb, t))
        out: list[Suggestion] = []
        seen: set[str] = set()
        depth = 0
        while len(out) < k and any(depth < len(t) for _, t in per_dataset):
            for nb, t in per_dataset:
                if depth >= len(t) or len(out) >= k:
                    continue
                row = t.iloc[depth]
                config = ctx.space.clip(row["config"])
                if config is None:
                    continue
                key = config_key(config)
                if key in seen:
                    continue
                seen.add(key)
                meta = study_meta.loc[row["study_id"]]
                fit = row["fit_seconds"]
                out.append(Suggestion(
                    rank=len(out) + 1, config=config, strategy=self.name,
                    source_dataset_id=nb.dataset_id, source_name=nb.name,
                    study_id=row["study_id"], study_label=meta["label"],
                    distance=nb.distance, score=float(row["score"]),
                    normalised_score=float(row["normalised"]), metric=meta["metric"],
                    fit_seconds=None if fit != fit else float(fit),
                    expected_fit_seconds=ctx.expected_seconds(fit, nb.dataset_id),
                ))
            depth += 1
        return out
