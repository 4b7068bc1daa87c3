"""Guided design search: rounds of proposals run as ordinary cases (see driver, pipeline, command)."""
