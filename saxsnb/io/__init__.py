"""Readers and writers of SAXS series.

- :func:`read_series`: a folder, glob or list of text-column files -> one series.
- :func:`write_text_series`: one text file per frame, with units and scan values.
- :func:`save_series` / :func:`open_series`: NetCDF (.nc), NXcanSAS (.h5, .nxs) and Zarr
  stores (.zarr, chunked along frame, read lazily).
- :func:`read_cansas_xml`: canSAS 1D XML files, parsed without entity expansion.

All readers return the Dataset layout of :mod:`saxsnb.series`; all writers write
atomically (a temporary file in the same folder, then a rename).
"""

from .cansas_xml import read_cansas_xml
from .images import image_series, read_images, write_tiff
from .store import open_series, save_series
from .text import read_series, write_text_series

__all__ = ["read_series", "open_series", "save_series", "write_text_series", "read_cansas_xml"]
__all__ += ["read_images", "image_series", "write_tiff"]
