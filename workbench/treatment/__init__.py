"""Engineering on top of the chemistry: the influent water, solubility curves, and (later) reagents, limits,
setpoints, sludge and jar tests. Returns plain results and DataFrames."""
