"""Pure chemistry: thermodynamic data, water properties, activity, the equilibrium solver.

No plotting, widgets or file writing here (a test checks that importing it loads neither plotly nor ipywidgets).
"""
