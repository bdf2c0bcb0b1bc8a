"""Studies: grids of tasks run on Dask, stored resumably, extrapolated and reported.

* :mod:`.grid` -- the study specification (flags or TOML) and its tasks;
* :mod:`.tasks` -- one task, run on a worker from its seed, and its stable id;
* :mod:`.engine` -- Dask distributed execution (embedded LocalCluster or a scheduler address);
* :mod:`.store` -- the study folder (row files, Parquet/CSV table, configuration guard);
* :mod:`.extrapolate`, :mod:`.report` -- finite-size extrapolation and the report;
* :mod:`.points` -- end points kept by ``keep_points`` and their overlaps;
* :mod:`.profile` -- kernel timings vs n; :mod:`.estimate` -- up-front cost estimates.

Energies are per spin, H(x)/n on the unit sphere, maximized.
"""

from .engine import SweepOutcome, WorkerPlan, available_cores, plan_workers, run_study
from .extrapolate import Extrapolation, extrapolate
from .grid import StudySpec, parse_seeds, parse_sizes, spec_from_flags, spec_from_toml
from .points import end_point_overlaps, load_end_points
from .report import Report, build_report, write_report
from .store import Store, StudyMismatchError
from .tasks import Task, run_instance_tasks, run_task

__all__ = [
    "Extrapolation",
    "Report",
    "Store",
    "StudyMismatchError",
    "StudySpec",
    "SweepOutcome",
    "Task",
    "WorkerPlan",
    "available_cores",
    "build_report",
    "end_point_overlaps",
    "extrapolate",
    "load_end_points",
    "parse_seeds",
    "parse_sizes",
    "plan_workers",
    "run_instance_tasks",
    "run_study",
    "run_task",
    "spec_from_flags",
    "spec_from_toml",
    "write_report",
]
