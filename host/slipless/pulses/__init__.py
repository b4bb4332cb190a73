"""Pulsed-field runs reduced to per-condition contrasts and a fit."""
