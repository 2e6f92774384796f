"""The live monitor: poll cycle, store lock, scheduler."""
