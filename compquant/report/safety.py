"""Safety notes for laser-induced breakdown and spark/arc emission work.

One list of notes, shown in three places from the same text: on every
certificate of analysis (:mod:`compquant.report.pdf`), in the README
(:func:`safety_markdown`) and in ``compquant analyse --help``
(:func:`safety_plain`).

The notes summarise the usual cautions of the trade.  They name the standards
that classify lasers (IEC 60825-1) and that describe the controls a laser user
puts in place (ANSI Z136.1); they do not replace them.  Every note defers to
local regulations and to the laboratory's licensed (or appointed) safety
officer, who sets the controls for the actual instrument and room.
"""

from __future__ import annotations

import textwrap
from dataclasses import dataclass


@dataclass(frozen=True)
class SafetyNote:
    """One safety caution: a short title and a paragraph of plain text."""

    title: str
    text: str


#: Closing sentence of every note (common practice: defer to the competent person on site).
DEFER = "Local regulations and the laboratory's licensed safety officer take precedence over this note."

SAFETY_NOTES: tuple[SafetyNote, ...] = (
    SafetyNote(
        "Class 4 laser radiation",
        "LIBS sources are usually Class 4 lasers under IEC 60825-1 (classes 1, 1M, 2, 2M, 3R, 3B, 4): "
        "the direct, specularly reflected and often the diffusely reflected beam can injure the eye "
        "and skin and can ignite materials. Following ANSI Z136.1 the user appoints a laser safety "
        "officer, determines the nominal hazard zone (NHZ), keeps the beam enclosed or the area "
        "controlled with restricted entry and warning signs, uses door and enclosure interlocks "
        "and never defeats them, and issues eyewear of sufficient optical density (OD) at the "
        "laser wavelength (e.g. 1064 nm, 532 nm, 266 nm) for the maximum pulse energy. Eyewear is "
        "the last line of defence, after engineering and administrative controls. " + DEFER,
    ),
    SafetyNote(
        "Ablation fumes and toxic particulates",
        "Each laser pulse or spark vaporises sample material into fine particles and fumes that "
        "can be inhaled. Samples may contain lead, cadmium, beryllium, chromium(VI), nickel or "
        "other toxic or carcinogenic elements; beryllium-copper and leaded alloys need particular "
        "care. Use local exhaust ventilation or fume extraction with suitable filtration at the "
        "sample chamber, keep the chamber closed while firing, clean it with methods that do not "
        "raise dust, and handle residues and filters as hazardous waste. " + DEFER,
    ),
    SafetyNote(
        "High voltage",
        "Flashlamp power supplies, Q-switch drivers and spark or arc sources use high voltages "
        "and store energy in capacitors that can stay charged after switch-off. Only trained, "
        "authorised staff may open covers; isolate, lock out and discharge before work. " + DEFER,
    ),
    SafetyNote(
        "Ultraviolet radiation and ozone",
        "Sparks, arcs and laser plasmas emit ultraviolet light that can burn the eyes and skin, "
        "and UV from sparks in air forms ozone. Keep the source enclosed or shielded, do not look "
        "at the discharge, and ventilate the stand. " + DEFER,
    ),
    SafetyNote(
        "Purge gas (argon) in closed rooms",
        "Argon and other purge gases displace oxygen without warning signs; a leak in a small or "
        "closed room can cause asphyxiation. Secure gas cylinders, check lines for leaks, ventilate "
        "the room and fit an oxygen-depletion monitor where the risk assessment calls for it. " + DEFER,
    ),
)


def safety_markdown(heading_level: int = 2) -> str:
    """Markdown rendering of the safety notes (for the README)."""
    h = "#" * max(1, min(6, heading_level))
    out = [
        f"{h} Safety notes",
        "",
        "compquant analyses data; the measurement itself can hurt people. The usual cautions:",
        "",
    ]
    for note in SAFETY_NOTES:
        out.append(f"- **{note.title}.** {note.text}")
    out.append("")
    return "\n".join(out)


def safety_plain(width: int = 78, indent: str = "") -> str:
    """Plain-text rendering, wrapped to ``width`` (for ``--help`` and terminals)."""
    out = []
    for note in SAFETY_NOTES:
        out.append(
            textwrap.fill(
                f"{note.title.upper()}: {note.text}",
                width=width,
                initial_indent=indent,
                subsequent_indent=indent + "  ",
            )
        )
    return "\n\n".join(out)


__all__ = ["SafetyNote", "SAFETY_NOTES", "DEFER", "safety_markdown", "safety_plain"]
