"""What people read: a batch folder's briefing and one run's report, each a self-contained HTML page and a Markdown
file with figures, built from the batch's tables (store_view) and the runs (run_view)."""

from .briefing import Briefing, BriefingError, brief, build, parse_formats, write
from .store_view import BriefingInputError, load_batch

__all__ = ["Briefing", "BriefingError", "BriefingInputError", "brief", "build", "load_batch", "parse_formats", "write"]
