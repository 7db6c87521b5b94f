"""Stage 1, the campaign: the YAML spec, its checks, and its resolution.

* :mod:`pesflow.campaign.spec` - pydantic models of the YAML file, the JSON schema;
* :mod:`pesflow.campaign.yaml_source` - reading YAML with line numbers, one-line errors;
* :mod:`pesflow.campaign.resolve` - :func:`load_campaign`: checks and resolution;
  its steps in :mod:`~pesflow.campaign.resolve_molecules`,
  :mod:`~pesflow.campaign.resolve_scans` and :mod:`~pesflow.campaign.resolve_levels`;
* :mod:`pesflow.campaign.resolved` - the resolved :class:`Campaign` later stages read;
* :mod:`pesflow.campaign.molecules` - molecule sources, electron counts, masses.
"""

from pesflow.campaign.resolve import load_campaign
from pesflow.campaign.resolved import Campaign

__all__ = ["Campaign", "load_campaign"]
