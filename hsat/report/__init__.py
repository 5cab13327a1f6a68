"""The report: a ReportLab PDF a sleep physician reviews, interprets and signs.

``render_draft(study_dir, site=None)`` writes ``report-draft.pdf`` (marked DRAFT) from the
study folder's summary.json and events.csv (events-reviewed.csv once the events were
reviewed and rescored; the report then says who reviewed them and what changed);
``render_signed(study_dir, signature)`` gives the bytes of a signed version, which
``hsat.signoff`` writes under a new name. Numbers are formatted in one place,
``hsat.report.fmt``.
"""

from hsat.report import fmt
from hsat.report._caution import CAUTION_POINTS, CAUTION_TITLE
from hsat.report._context import CONTEXT, ReportContext, load_context
from hsat.report._fonts import describe_chars, load_fonts, undrawable
from hsat.report._markup import Block, parse_markup, plain_text
from hsat.report._render import DRAFT_NAME, render_draft, render_pdf_bytes, render_signed
from hsat.report._review import ReviewFacts, load_review
from hsat.report._signature import ACKNOWLEDGEMENT_TEXT, Amendment, Signature
from hsat.report._traces import minmax_decimate, overnight_traces

__all__ = [
    "ACKNOWLEDGEMENT_TEXT", "CAUTION_POINTS", "CAUTION_TITLE", "CONTEXT", "DRAFT_NAME",
    "Amendment", "Block", "ReportContext", "ReviewFacts", "Signature", "describe_chars",
    "fmt", "load_context", "load_fonts", "load_review", "minmax_decimate",
    "overnight_traces", "parse_markup", "plain_text", "render_draft", "render_pdf_bytes",
    "render_signed", "undrawable",
]
