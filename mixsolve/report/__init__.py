"""Tables and text summaries derived from results and libraries (no I/O)."""
