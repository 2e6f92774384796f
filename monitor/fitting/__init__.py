"""Fitting kinetics from history or lab runs: sources, candidates, the job, plots."""
