"""The run's report (``report.html``) and the groups file that sorts its cells."""
from .groups import Groups, GroupsFileError, read_groups
from .html import (REPORT_MODES, SELF_CONTAINED_MAX_CELLS, figure_embedding, report_html,
                   write_report)
from .values import cell_values

__all__ = ["Groups", "GroupsFileError", "read_groups", "cell_values", "report_html",
           "write_report", "figure_embedding", "REPORT_MODES", "SELF_CONTAINED_MAX_CELLS"]
