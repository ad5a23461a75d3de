"""Review states of a certificate and the review printed on it.

A certificate is issued as a ``draft`` (DRAFT watermark on every PDF page, ``review.state =
"draft"`` in the JSON) unless the lab profile sets ``[review] required = false``.  A reviewer then
``released`` it (the final PDF and JSON are rendered with the reviewer's authorisation) or
``rejected`` it with a reason; an amendment is a new revision that, once released, makes the
earlier one ``superseded``.  A draft replaced by a new analysis of the same sample is also
``superseded``.  Transitions are checked here and, again, by the database's triggers.
"""

from __future__ import annotations

from dataclasses import dataclass

DRAFT = "draft"
RELEASED = "released"
REJECTED = "rejected"
SUPERSEDED = "superseded"
STATES = (DRAFT, RELEASED, REJECTED, SUPERSEDED)

#: allowed state changes (the database triggers enforce the same)
TRANSITIONS = {DRAFT: {RELEASED, REJECTED, SUPERSEDED}, RELEASED: {SUPERSEDED}, REJECTED: set(), SUPERSEDED: set()}

#: the text on the certificate when the lab profile issues without a separate review step
NO_REVIEW_STATEMENT = (
    "Issued without a separate review step, as the laboratory's profile sets ([review] required = false)."
)


@dataclass(frozen=True)
class Review:
    """The review printed on a certificate (PDF authorisation block, JSON ``review``)."""

    state: str = DRAFT
    reviewer: str = ""
    role: str = ""
    at: str = ""  # ISO 8601 UTC
    statement: str = ""

    def as_dict(self) -> dict:
        return {"state": self.state, "reviewer": self.reviewer, "role": self.role, "at": self.at,
                "statement": self.statement}


def initial_review(lab_profile, lab_given: bool, issued_at: str) -> Review:
    """How ``analyse`` issues: a draft, unless the lab profile says no review step is required.

    Without a lab profile nobody is named: always a draft.
    """
    if lab_given and not getattr(lab_profile, "review_required", True):
        return Review(RELEASED, lab_profile.signatory_name, lab_profile.signatory_title, issued_at,
                      NO_REVIEW_STATEMENT)
    return Review(DRAFT)


__all__ = ["DRAFT", "RELEASED", "REJECTED", "SUPERSEDED", "STATES", "TRANSITIONS", "Review", "initial_review",
           "NO_REVIEW_STATEMENT"]
