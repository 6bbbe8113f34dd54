"""Outputs: the terminal summary and the JSON results, written atomically."""
