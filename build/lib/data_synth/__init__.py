"""Synthetic certificates of analysis from fictional laboratories, as a labelled word table."""

from data_synth.generator import LABELS, generate
from data_synth.layouts import LAYOUT_IDS
from data_synth.noise import NoiseConfig

__all__ = ["LABELS", "LAYOUT_IDS", "NoiseConfig", "generate"]
