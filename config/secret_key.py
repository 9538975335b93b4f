"""What a production ``SECRET_KEY`` must be (read by ``config.settings.production`` before any
app is loaded, so plain Python)."""

from __future__ import annotations

# Secrets that are not: the words of the examples and development defaults people copy.
_PLACEHOLDER_WORDS = ("replace", "change", "example", "placeholder", "not-secret", "insecure")
MIN_SECRET_KEY_LENGTH = 50


def secret_key_problem(key: str) -> str | None:
    """Why ``key`` cannot sign production sessions, or None (Django's own deploy check asks
    for at least 50 characters and 5 distinct ones)."""
    if not key:
        return "SECRET_KEY must be set in production"
    lowered = key.lower()
    if any(word in lowered for word in _PLACEHOLDER_WORDS):
        return "SECRET_KEY is a placeholder; set a long random secret"
    if len(key) < MIN_SECRET_KEY_LENGTH or len(set(key)) < 5:
        return (
            f"SECRET_KEY is too short or too plain ({len(key)} characters); use at least "
            f"{MIN_SECRET_KEY_LENGTH} random ones"
        )
    return None
