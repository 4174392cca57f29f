"""Tensors: any array-like to a numpy view, safe file readers, scans and block-scaled formats.

Never imports ipywidgets, IPython or matplotlib; torch, JAX and dask only when given one.
"""
