"""Briefings: a batch folder turned into a self-contained HTML page and a Markdown file with figures."""

from .briefing import Briefing, BriefingError, brief, build, parse_formats, write
from .store_view import BriefingInputError, load_batch

__all__ = ["Briefing", "BriefingError", "BriefingInputError", "brief", "build", "load_batch", "parse_formats", "write"]
