"""Workflows: file-to-file jobs that join readers, the core and reports."""
