"""Interactive views (ipywidgets + plotly FigureWidget) over the treatment layer: thin, no chemistry.

``SetpointPanel`` (influent, limits, margin, reagent -> window, setpoint, headroom, dose, sludge, band) and
``JarTestPanel`` (bench results over the predicted curves, fitted solubility shifts, flags, calibration into a
scenario file). Display one as the last line of a notebook cell.
"""

from workbench.widgets.jar_tests import JarTestPanel
from workbench.widgets.setpoint import SetpointPanel

__all__ = ["JarTestPanel", "SetpointPanel"]
