"""The morning briefing: figures and ``report.html``."""
