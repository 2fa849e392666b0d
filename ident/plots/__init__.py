"""Matplotlib figures of rigfit results (each takes an optional ``ax`` and returns the Figure)."""
