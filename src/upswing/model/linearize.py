"""Linear models of the rig about its equilibria, by automatic differentiation of the exact dynamics."""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from upswing.model.dynamics import model_for
from upswing.model.equilibria import equilibrium_state
from upswing.model.rig import PARAMETER_NAMES, Rig


@dataclass(frozen=True)
class LinearModel:
    """x_dot ~= A (x - x_eq) + B (u - u_eq) about an equilibrium.

    Attributes
    ----------
    equilibrium : str
        Name of the equilibrium (``upright``, ``hanging``, ``down-up``, ``up-down``).
    A : ndarray, shape (n_states, n_states)
        State matrix [1/s and the units of the state ratios].
    B : ndarray, shape (n_states, n_inputs)
        Input matrix.
    x_eq : ndarray, shape (n_states,)
        Equilibrium state.
    u_eq : ndarray, shape (n_inputs,)
        Equilibrium input (zero at the four equilibria: gravity torques vanish there).
    state_names, input_names : tuple of str
        Names of the rows of A and the columns of B.
    """

    equilibrium: str
    A: np.ndarray
    B: np.ndarray
    x_eq: np.ndarray
    u_eq: np.ndarray
    state_names: tuple[str, ...]
    input_names: tuple[str, ...]

    @property
    def eigenvalues(self) -> np.ndarray:
        """Eigenvalues of A [1/s], sorted by real part, largest first."""
        eig = np.linalg.eigvals(self.A).astype(complex)
        return eig[np.lexsort((eig.imag, -eig.real))]


def _coulomb_free(rig: Rig) -> np.ndarray:
    """Parameter vector with the Coulomb terms zeroed: linearizations leave dry friction out."""
    p = rig.parameter_vector()
    for i, name in enumerate(PARAMETER_NAMES):
        if name.endswith(".coulomb"):
            p[i] = 0.0
    return p


def linearize(rig: Rig, equilibrium: str = "upright", *, x_eq: np.ndarray | None = None,
              u_eq: np.ndarray | None = None) -> LinearModel:
    """Jacobians A = df/dx and B = df/du at an equilibrium, by casadi's automatic differentiation.

    Coulomb friction is left out (``docs/conventions.md``); viscous friction is kept.

    Parameters
    ----------
    rig : Rig
    equilibrium : str
        Name of one of the four equilibria; used for ``x_eq`` when that is not given.
    x_eq, u_eq : ndarray, optional
        Linearize about another point (e.g. along a trajectory); ``u_eq`` defaults to zero.

    Returns
    -------
    LinearModel
    """
    model = model_for(rig)
    x0 = equilibrium_state(rig, equilibrium) if x_eq is None else np.asarray(x_eq, dtype=float)
    u0 = np.zeros(rig.n_inputs) if u_eq is None else np.asarray(u_eq, dtype=float)
    A, B = model.jacobians(x0, u0, _coulomb_free(rig))
    return LinearModel(equilibrium=equilibrium, A=np.array(A), B=np.array(B), x_eq=x0, u_eq=u0,
                       state_names=rig.state_names, input_names=rig.input_names)

