"""Surveys: many stars on a local process pool or a Dask cluster, resumable, losing nothing.

Modules, in the order a survey uses them:

* :mod:`~rotinfer.survey.manifest` — inputs (folders, patterns, files or a manifest)
  to :class:`~rotinfer.survey.tasks.StarTask` objects;
* :mod:`~rotinfer.survey.tasks` — safe folder names and per-star seeds;
* :mod:`~rotinfer.survey.executors` — the local pool and Dask, behind one futures interface;
* :mod:`~rotinfer.survey.worker` — :func:`process_star`, the unit of work in a worker;
* :mod:`~rotinfer.survey.store` — atomic star folders, completion markers, resume;
* :mod:`~rotinfer.survey.catalog` — ``catalog.ecsv`` / ``catalog.csv``;
* :mod:`~rotinfer.survey.run` — :func:`run_survey`, the driver.
"""

from .catalog import CATALOG_COLUMNS, build_catalog, write_catalog
from .executors import available_executors
from .manifest import collect_tasks, read_manifest
from .run import SurveyInterrupted, SurveyResult, run_survey
from .store import StarRecord, SurveyStore
from .tasks import StarTask, assign_folder_names, sanitise_identifier, star_seed
from .worker import StarTimeout, analyse_with_pipeline, process_star

__all__ = [
    "CATALOG_COLUMNS",
    "StarRecord",
    "StarTask",
    "StarTimeout",
    "SurveyInterrupted",
    "SurveyResult",
    "SurveyStore",
    "analyse_with_pipeline",
    "assign_folder_names",
    "available_executors",
    "build_catalog",
    "collect_tasks",
    "process_star",
    "read_manifest",
    "run_survey",
    "sanitise_identifier",
    "star_seed",
    "write_catalog",
]
