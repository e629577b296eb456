"""The CI regression gate: rules and tolerances, the committed baseline, outputs, the command."""
