"""Presentation: everything a person reads. Text tables and lines for the terminal
(:mod:`runner.present.text`), the tier-band layout, SVG pictures and the HTML report.
Nothing here computes a result; it renders records and the results handed to it."""
