"""The commands' work in order: fit, predict, compare, prior check, batch, calibrate, the demo, and the kinds of
study that tie data, model, tables and figures together.

May import every layer below it (``outputs``, ``model``, ``posterior``, ``inputs``, ``physics``).
"""
