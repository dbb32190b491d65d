"""The HTML report: grouped findings with pictures of the layout and the aerial image."""
