"""The HTML report: grouped findings with pictures of the layout and the aerial image."""

PICTURED_GROUPS = 40
"""Groups drawn with pictures by default, worst first (about 0.15 s each); the
report's index lists every group."""
