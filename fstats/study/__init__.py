"""Study: whole-study runs, one task per recording (local processes or Dask), resume.

``run_study(path)`` reads a study file, runs every recording through the subject
stages as independent tasks (reusing those whose inputs and options are
unchanged), then the group model and the reports; ``regroup(path)`` reruns only
the group level and reports from stored subject results.
"""

from fstats.study.engine import SCHEDULERS, StudyProgress, default_workers, run_tasks
from fstats.study.run import StudyOutcome, regroup, run_study
from fstats.study.studyfile import StudyRecording, StudySpec, load_study
from fstats.study.task import OUTCOME_STATES, SubjectOutcome, SubjectTask, analyse_subject

__all__ = [
    "OUTCOME_STATES",
    "SCHEDULERS",
    "StudyOutcome",
    "StudyProgress",
    "StudyRecording",
    "StudySpec",
    "SubjectOutcome",
    "SubjectTask",
    "analyse_subject",
    "default_workers",
    "load_study",
    "regroup",
    "run_study",
    "run_tasks",
]
