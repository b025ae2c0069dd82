"""Jobs: intake, runs, corrections, states and the per-job facts the measures read."""

# Importing the facts registers the flush hook that keeps every job's facts in step.
from shopapp.jobs import facts as facts
