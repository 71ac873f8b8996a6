"""The safety cautions shown with every route a person looks at (check, show, job sheet)."""

__all__ = ["CAUTIONS", "caution_text"]

CAUTIONS = (
    "Dry-run every new or changed route (no cutting, reduced speed, hand on the stop) before "
    "running it for real.",
    "Keep guards, light curtains and emergency stops in place and working; this tool does not "
    "replace them.",
    "Follow the machine builder's instructions and local codes (ISO 12100 and the machine's own "
    "safety standard).",
    "Never trust a route whose scene does not match the real table: clamps, fixtures, parts and "
    "head must be where the scene says.",
)


def caution_text(prefix: str = "  ! ") -> str:
    """The cautions as plain text lines."""
    return "\n".join(prefix + line for line in CAUTIONS)
