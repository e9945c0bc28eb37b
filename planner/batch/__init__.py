"""Archive triage: many episodes into a resumable SQLite catalogue, locally or on a Dask cluster.

Map of the package (docs/triage.md):

- :mod:`~planner.batch.sources`: :func:`discover` a folder (files paired by name) or a CSV
  manifest into :class:`EpisodeJob` records;
- :mod:`~planner.batch.triage`: :func:`triage_episode` (one episode, pure: paths and
  settings in, :class:`EpisodeResult` out) and :func:`run_triage` (the batch);
- :mod:`~planner.batch.backends`: the local process pool and the Dask cluster client;
- :mod:`~planner.batch.summary`: a plan boiled down to the catalogue's figures;
- :mod:`~planner.batch.catalogue`: the SQLite catalogue (:class:`Catalogue`);
- :mod:`~planner.batch.reports`: :func:`triage_report` (ranked, worst first) and
  :func:`episode_report`;
- :mod:`~planner.batch.cli` and :mod:`~planner.batch.display`: ``cueplan triage``.
"""

from __future__ import annotations

import importlib
from typing import Any

#: Public name -> module that defines it. Imported on first use (PEP 562), so that mounting
#: ``cueplan triage`` in the command line does not load the whole pipeline.
_EXPORTS = {
    "Catalogue": "catalogue",
    "Discovery": "sources",
    "EpisodeJob": "sources",
    "EpisodeReport": "reports",
    "EpisodeResult": "triage",
    "ReportRow": "reports",
    "TriageSettings": "triage",
    "TriageSummary": "triage",
    "Unpaired": "sources",
    "discover": "sources",
    "episode_report": "reports",
    "run_triage": "triage",
    "triage_episode": "triage",
    "triage_report": "reports",
}


def __getattr__(name: str) -> Any:
    if name not in _EXPORTS:
        raise AttributeError(f"module 'planner.batch' has no attribute {name!r}")
    return getattr(importlib.import_module(f"planner.batch.{_EXPORTS[name]}"), name)


__all__ = [  # noqa: F822 - provided by __getattr__
    "Catalogue",
    "Discovery",
    "EpisodeJob",
    "EpisodeReport",
    "EpisodeResult",
    "ReportRow",
    "TriageSettings",
    "TriageSummary",
    "Unpaired",
    "discover",
    "episode_report",
    "run_triage",
    "triage_episode",
    "triage_report",
]
