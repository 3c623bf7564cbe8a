"""Demo data for the Kelpwick Quay Co-operative: question families, reference solvers, generators."""
