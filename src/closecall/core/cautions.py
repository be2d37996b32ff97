"""The cautions every view carries (README, --help, the TUI's help screen)."""

CAUTIONS = (
    "closecall supports human review; it decides nothing. Every decision stays with the person "
    "who records it.",
    "Whether and how a protected (group) attribute may be processed is set by local "
    "anti-discrimination and data-protection law. Ask your legal and data-protection officers "
    "before you load one.",
    "Its statistics are evidence for review, not legal findings.",
)
