"""Entry points of the public Python API that are more than a re-export.

:func:`survey` runs a whole survey from Python: files and directories through
:func:`tumble.survey.run_survey`, or a partitioned Parquet light-curve catalogue
through :func:`tumble.catalog.run_catalog`.
"""

from __future__ import annotations

import os
from pathlib import Path

__all__ = ["survey"]


def survey(inputs, out, config=None, *, catalog: bool | None = None, **kwargs):
    """Process every object of a survey and write the results.

    Parameters
    ----------
    inputs : path, sequence of paths, or DataFrame
        Photometry files, directories or glob patterns (one object per file or
        an ``object`` column); or one partitioned Parquet catalogue directory.
    out : path
        Results: a catalogue file (ECSV, FITS, CSV, Parquet by the extension) for
        files; a directory of Parquet partitions for a catalogue.
    config : tumble.survey.SurveyConfig, optional
        What to run per object (default: the screen and classification defaults).
    catalog : bool, optional
        Treat ``inputs`` as a partitioned Parquet catalogue (default: when it is a
        directory with Parquet dataset or HATS metadata files, or ``Norder=``
        partition folders; a plain folder of files is a survey of files).
    **kwargs
        Passed to :func:`tumble.survey.run_survey` (``workers``, ``resume``, ...)
        or :func:`tumble.catalog.run_catalog`.

    Returns
    -------
    tumble.survey.SurveySummary or tumble.catalog.CatalogSummary

    Notes
    -----
    Results are scientific estimates for research use.
    """
    if catalog is None:
        catalog = _looks_like_catalog(inputs)
    if catalog:
        from tumble.catalog import run_catalog

        return run_catalog(inputs, out, config, **kwargs)
    from tumble.survey import run_survey

    if isinstance(inputs, (str, os.PathLike)):
        inputs = [inputs]
    return run_survey(inputs, out, config, **kwargs)


#: Files and folders that mark a partitioned catalogue directory (Parquet dataset metadata, HATS layout).
CATALOG_MARKERS = ("_metadata", "_common_metadata", "partition_info.csv", "properties", "hats.properties",
                   "_tumble_catalog.json")


def _looks_like_catalog(inputs) -> bool:
    """A directory with Parquet dataset or HATS metadata, or ``Norder=`` partition folders."""
    if not isinstance(inputs, (str, os.PathLike)):
        return False
    path = Path(inputs)
    if not path.is_dir():
        return False
    if any((path / m).exists() for m in CATALOG_MARKERS):
        return True
    return any(p.is_dir() and p.name.startswith("Norder=") for p in path.iterdir())
