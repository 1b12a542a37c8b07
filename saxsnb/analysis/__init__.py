"""Pure numerical functions on numpy arrays, vectorised over a leading frame axis.

Nothing here imports xarray, ipywidgets or bqplot, prints, or reads files.
"""
