"""Pure computation: pandas, numpy and scipy only (never ipywidgets, altair or IPython).

Each module holds one section's computation and, beside it, the writer of the
plain pandas code that reproduces it.
"""

__all__: list[str] = []
