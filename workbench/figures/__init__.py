"""Plotly figure builders: ``fig_<what>(result, *, fig=None) -> go.Figure``. Pure: no solving, no widgets."""

from workbench.figures.jar_tests import fig_jar_tests
from workbench.figures.residuals import fig_residual_curve
from workbench.figures.titration import fig_titration

__all__ = ["fig_jar_tests", "fig_residual_curve", "fig_titration"]

# setpoint figure and captions (permit figures)
from workbench.figures.caption import add_caption  # noqa: E402
from workbench.figures.setpoint import fig_setpoint  # noqa: E402

__all__ += ["add_caption", "fig_setpoint"]
