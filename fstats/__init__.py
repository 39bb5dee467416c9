"""fstats: statistics of functional-activation studies measured with DCS.

Data flow one way through the stages, one subpackage each::

    inputs -> flow -> design -> fit -> group -> report      (study runs them per cohort)

fstats is a research tool, not a diagnostic device; clinical use follows local
regulation and licensed practice.
"""

from fstats.errors import InputError
from fstats.inputs import read_cohort, read_recording
from fstats.inputs.recording import AuxSignal, Channel, Recording, TaskTiming

__version__ = "0.1.0"

__all__ = [
    "__version__",
    "InputError",
    "Recording",
    "Channel",
    "TaskTiming",
    "AuxSignal",
    "read_recording",
    "read_cohort",
]
