"""Rendering of result Datasets: terminal tables, HTML and Markdown reports, figures."""

__all__: list[str] = []
