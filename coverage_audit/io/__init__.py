"""Readers for the inputs as published.

Census downloads, boundary files, relationship files and lending records. Each reader
returns its frame, its input records and its exclusions; nothing here computes a statistic.
"""
