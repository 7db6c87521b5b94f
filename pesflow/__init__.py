"""pesflow: potential-energy-surface scans for sets of molecules at several levels of theory.

The package is organised as a pipeline of stages, each in its own module::

    spec -> plan -> (Snakemake) -> engine -> store -> analysis -> report

See DEVELOPERS.md for the map.  From Python: ``pesflow.load("campaign.yaml")`` returns a
:class:`pesflow.api.Campaign` with the command's verbs as methods (imported on first use, so
that ``import pesflow`` stays cheap).
"""

__version__ = "0.1.0"

__all__ = ["Campaign", "load", "__version__"]


def __getattr__(name):
    if name in ("load", "Campaign"):
        from pesflow import api

        return getattr(api, name)
    raise AttributeError(f"module 'pesflow' has no attribute {name!r}")
