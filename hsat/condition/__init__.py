"""Stage 2, condition: filters, artefact and validity masks, position, wake, monitoring time.

``condition_recording(rec, excluded=[])`` returns a ``hsat.recording.Conditioned``;
``describe(cond)`` turns it into the JSON-ready account ``hsat check`` prints. Each step's
module docstring names its source or says common practice.
"""

from hsat.condition._describe import describe
from hsat.condition._stage import condition_recording
from hsat.condition._wake import HOW_WAKE_IS_JUDGED

__all__ = ["HOW_WAKE_IS_JUDGED", "condition_recording", "describe"]
