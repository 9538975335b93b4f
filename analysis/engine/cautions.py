"""Safety cautions carried by every procedure verdict, isolation plan and report that a crew
might act on. The wording is ours; the rules it defers to are the utility's and the law's."""

CAUTIONS: tuple[str, ...] = (
    "This result is an aid to planning, not a switching order. It is only as good as the "
    "recorded wiring; verify field conditions, terminal markings and test-switch positions "
    "against the drawings and on site before any work.",
    "An open CT secondary on an energized circuit can develop a dangerous voltage, arc, and "
    "injure people or destroy equipment. Short the secondary with an approved shorting "
    "provision before opening it, and confirm the short (for example with a clamp meter) "
    "before lifting or removing anything.",
    "Local codes, the utility's own switching, lockout and tagging rules, and licensed, "
    "qualified practice take precedence over anything this tool reports.",
)


def cautions() -> list[str]:
    """The cautions as a fresh list (callers put it in JSON bodies)."""
    return list(CAUTIONS)
