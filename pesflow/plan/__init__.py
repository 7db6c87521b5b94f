"""Stage 2, the plan: a campaign expanded into points with content keys, walks cut into
batches, and the cost estimate.  Pure: no file is read or written here."""
