"""The choices and limits the `recourse` command offers, light to import: `recourse --help`
lists them without loading the planner, numpy or pandas (the modules that use them import
them from here)."""

from __future__ import annotations

SOLVERS = ("highs", "cbc", "exact")  # exact: recourse.solver, built for this program's shape
DEFAULT_SOLVER = "exact"  # recourse.solver; many rows: recourse.batch_plans (bench/RESULTS.md)
ENGINES = ("local", "dask")  # where a population's partitions run (recourse.scale)
# rows the fast exact solver handed to the general integer program (exact, slower)
HANDED_WORDS = "planned by the integer program instead of the fast solver"
MOST_PLANS = 100  # distinct plans per row: more asks for a search with no useful end
MOST_JOBS = 256  # processes side by side: more than this only thrash a machine
# groups with fewer declined rows are shown, not flagged: glassbox.explaining.groups.MIN_GROUP
# (the same number; tests/test_recourse_cli.py holds them equal)
MIN_GROUP = 30
# the same words for --jobs as every glassbox command's
JOBS_HELP = "Processes working side by side; 1 starts none."
