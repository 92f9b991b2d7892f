"""The HTML report: a renderer that only renders (:mod:`.html`), and the run report
that assembles what the analyses give it (:mod:`.run_report`)."""

from __future__ import annotations

from preyscape.report.html import CAUTIONS, CSP, Report, Section

__all__ = ["CAUTIONS", "CSP", "Report", "Section"]
