"""The run's report (``report.html``) and the groups file that sorts its cells."""
from .groups import Groups, GroupsFileError, read_groups
from .html import EMBED_LIMIT_BYTES, cell_values, report_html, write_report

__all__ = ["Groups", "GroupsFileError", "read_groups", "cell_values", "report_html",
           "write_report", "EMBED_LIMIT_BYTES"]
