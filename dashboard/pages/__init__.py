"""The three pages of the dashboard: Recording, Delay & dimension, Invariants."""
