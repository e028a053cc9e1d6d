"""The one representation and what every job shares: the additive model and its tables, schemas and
typed data, model files, safe output files, exact sums, block readers and worker pools."""
