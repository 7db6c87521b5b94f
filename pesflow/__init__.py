"""pesflow: potential-energy-surface scans for sets of molecules at several levels of theory.

The package is organised as a pipeline of stages, each in its own module::

    spec -> plan -> (Snakemake) -> engine -> store -> analysis -> report

See DEVELOPERS.md for the map.
"""

__version__ = "0.1.0"
