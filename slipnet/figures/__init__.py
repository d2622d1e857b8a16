"""Figures, kept apart from the computations: one module per pipeline step.

Every map figure has axes in µm, a scale bar, colour-blind-safe colour maps for scalar data
(viridis / cividis), and a colour bar or legend that states units.
"""
