"""Error types shared by the edges (CLI, web) without importing the numerical stack."""


class SettingsError(ValueError):
    """Analysis settings that cannot be used; the message says what to change."""
