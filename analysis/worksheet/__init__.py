"""The printable work sheet (PDF) of a verified isolation plan or a safe stored procedure.

No Django here: the pages call ``worksheet_for_plan`` / ``worksheet_for_procedure`` with the
JSON of ``analysis.actions`` and turn ``WorksheetRefused`` into a message."""

from analysis.worksheet.pdf import (
    WorksheetRefused,
    worksheet_for_plan,
    worksheet_for_procedure,
    worksheet_pdf,
)

__all__ = ["WorksheetRefused", "worksheet_for_plan", "worksheet_for_procedure", "worksheet_pdf"]
