"""upswing: from a double-pendulum rig file to a controller that is safe to run on the hardware.

The package is laid out as the pipeline it serves::

    model/         rig file -> validated Rig -> equations of motion -> equilibria and linear models
    synthesis/     balance (LQR, estimator, margins, schedules) and swing-up controllers
    verification/  batch nonlinear simulation, Monte Carlo, region of attraction, budgets, hazards
    export/        gain tables for firmware (JSON, CSV, C headers)
    report/        human-readable output

Every result a person acts on carries cautions: gains and trajectories must first be tried at reduced actuator
limits with an emergency stop within reach (ISO 13850), and local codes and licensed practice govern.
"""

from importlib.metadata import PackageNotFoundError, version

try:
    __version__ = version("upswing")
except PackageNotFoundError:  # running from a source tree without installation
    __version__ = "0.0.0+source"

__all__ = ["__version__"]
