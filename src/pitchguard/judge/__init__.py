"""Judging: checks, finding records, regions, fix hints, ideal gratings."""
