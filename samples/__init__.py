"""Demo data for the Saltmarsh Harbour Co-operative: question families, reference solvers, generators."""
