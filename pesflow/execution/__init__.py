"""Stage 3, execution: the driver that writes batch tasks and runs Snakemake, and the batch
that one Snakemake job runs (a walk of single points through the engine into the store)."""
