"""The clinical-use caution printed on the summary page and in the technical section.

The points follow the AASM clinical practice guideline (Kapur et al., J Clin
Sleep Med 2017;13(3):479-504): HSAT counts events per hour of monitoring time rather than
sleep time and can underestimate severity; a negative, inconclusive or technically
inadequate HSAT in a patient with suspected OSA calls for in-laboratory polysomnography;
HSAT is not for patients with significant cardiopulmonary disease, respiratory-muscle
weakness from neuromuscular disease, and the other comorbidities the guideline excludes
(recommendations R3 and R4, paraphrased from memory; standards.md sections 3.3 and 8).
"""

from __future__ import annotations

CAUTION_TITLE = "Before you act on these numbers"

#: One sentence per point; the tests look for these sentences on page 1.
CAUTION_POINTS: tuple[str, ...] = (
    "Events were scored by software. A qualified clinician must check the scoring "
    "against the raw signals before this report is used.",
    "A home study divides events by monitoring time, not by sleep time, so the indices "
    "can understate how severe the breathing disorder is.",
    "If obstructive sleep apnea is suspected and this study is negative, inconclusive or "
    "technically inadequate, arrange in-laboratory polysomnography.",
    "These methods have not been validated for patients with significant "
    "cardiopulmonary, neuromuscular or other conditions that the guidelines exclude "
    "from home testing.",
    "The figures support, and do not replace, clinical judgement. Local regulations and "
    "licensed clinical practice take precedence.",
)
