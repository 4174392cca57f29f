"""The numeric core: exact values, correctly rounded casts, fields, ULPs and neighbours.

Never imports ipywidgets, IPython or matplotlib: usable in scripts, tests and CI jobs.
"""
