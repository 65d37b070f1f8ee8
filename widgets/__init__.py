"""kipup.widgets: the notebook workbench (ipywidgets + pythreejs).

May import :mod:`kipup.core`; :mod:`kipup.core` never imports this package.
"""
from .robot_view import RobotView

__all__ = ["RobotView"]
