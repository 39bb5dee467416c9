"""report stage of fstats: subject and cohort HTML pages with PNG/SVG figures.

Pages are single self-contained HTML files (figures embedded as PNG data URIs)
rendered from the Jinja2 templates in ``fstats/report/templates/`` with
autoescaping on; every figure is also written as PNG and SVG to
``<page>_figures/`` beside the page.
"""

from fstats.report.subject import SUBJECT_SECTIONS, subject_report

__all__ = ["subject_report", "SUBJECT_SECTIONS"]
