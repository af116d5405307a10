"""Outputs of an assessment: JSON and CSV (:mod:`.export`), figures and the PDF."""
