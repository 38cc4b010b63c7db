"""Widgets of the live screen and the helpers they share (plot specs, headroom, advice)."""
