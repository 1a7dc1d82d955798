"""Rendering: the terminal summary, charts and the HTML report (reads result tables only)."""
