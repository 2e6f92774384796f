"""The live monitor: poll cycle, batch registry, store lock, scheduler."""
