"""ipywidgets composites: state in traits, computing in the core, markup from the render layer."""
