"""Results of a test: gauge lines, area gauges, probes, histories; the force log and its clock; tensile results."""
