"""The second collection of question families: kinds unlike the demo ones, kept out of `make demo`."""
