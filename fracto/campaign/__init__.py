"""Campaigns: batch scoring of many fractographs, result store, summaries, transition curves.

- :mod:`fracto.campaign.manifest` reads and checks manifests and folders;
- :mod:`fracto.campaign.store` is the SQLite result store;
- :mod:`fracto.campaign.runner` scores one item, locally or on a Dask cluster;
- :mod:`fracto.campaign.summary` writes images.csv, specimens.csv, provenance.json;
- :mod:`fracto.campaign.batch` runs the whole batch (:func:`run_batch`);
- :mod:`fracto.campaign.transition` fits mode fractions against temperature;
- :mod:`fracto.campaign.report` writes the HTML report.

Submodules are imported on use, so ``import fracto.campaign`` stays cheap.
"""

from __future__ import annotations

__all__ = ["run_batch"]


def run_batch(*args, **kwargs):
    """See :func:`fracto.campaign.batch.run_batch`."""
    from fracto.campaign.batch import run_batch as _run

    return _run(*args, **kwargs)
