"""Matching, metrics and what limits them: scoring stages built on the COCO box rules."""
