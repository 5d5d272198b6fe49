"""Scan readers, simulator writers, run folders, surveys, tables and atomic writing: all file I/O."""
