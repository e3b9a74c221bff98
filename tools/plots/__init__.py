"""Figures of single runs and sweeps (PNG, matplotlib Agg), and the fields they show."""
