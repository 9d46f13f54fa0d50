"""Plotly figure builders: ``fig_<what>(result, *, fig=None) -> go.Figure``. Pure: no solving, no widgets."""

from workbench.figures.residuals import fig_residual_curve

__all__ = ["fig_residual_curve"]
