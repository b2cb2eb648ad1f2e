"""Figures: strain and displacement maps, line plots, animations, the stress-strain plot."""
