"""Many batches of a recipe: golden profile, per-batch figures, drift review, backtest."""
