"""Render layer: pure functions from result objects to HTML strings and plain text.

May import numerics (and tensors); never ipywidgets, so every view is also available headless.
"""
