"""report stage of fstats: subject and cohort HTML pages with PNG/SVG figures.

Pages are single self-contained HTML files (figures embedded as PNG data URIs)
rendered from the Jinja2 templates in ``fstats/report/templates/`` with
autoescaping on; every figure is also written as PNG and SVG to
``<page>_figures/`` beside the page.
"""

from fstats.report.cohort import COHORT_SECTIONS, cohort_report
from fstats.report.courses import average_time_courses, subject_time_courses
from fstats.report.render import CAUTION
from fstats.report.subject import SUBJECT_SECTIONS, subject_report

__all__ = [
    "subject_report",
    "cohort_report",
    "subject_time_courses",
    "average_time_courses",
    "SUBJECT_SECTIONS",
    "COHORT_SECTIONS",
    "CAUTION",
]
