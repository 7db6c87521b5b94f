"""Stage 1, the campaign: the YAML spec, its checks, and its resolution into molecules,
scans and levels (:class:`~pesflow.campaign.spec.Campaign`)."""
