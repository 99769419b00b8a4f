"""A Gaussian belief over the pose (x m, y m, heading rad): the extended Kalman filter's steps.

- **Prediction** by an odometry record (forward f, left l in the frame at the start, then a turn τ):
  the mean moves by exact pose composition, the covariance by the Jacobian F of that composition,
  P' = F P Fᵀ + Q, Q = diag(σ², σ², σ_θ²) in the world frame (the isotropic translation noise and the
  heading noise of the odometry model).
- **Update** by a reading linearised at the mean (``Linearised``: innovation ν = z − h(x̄), Jacobian H,
  noise R): S = H P Hᵀ + R, K = P Hᵀ S⁻¹, x̄' = x̄ + K ν, P' = (I − K H) P (I − K H)ᵀ + K R Kᵀ (Joseph form,
  which keeps P symmetric and positive semi-definite under rounding).  The normalised innovation squared
  NIS = νᵀ S⁻¹ ν is χ²_m distributed when the model is right (Bar-Shalom, Li & Kirubarajan 2001,
  *Estimation with Applications to Tracking and Navigation*, §5.4): its χ² test is the gate.
- **Iterated update** for readings far from linear (a scan on a distance field): Gauss–Newton on the prior
  and the reading together, relinearising at each new estimate (the iterated EKF, Bell & Cathey 1993,
  "The iterated Kalman filter update as a Gauss–Newton method").

These are the textbook EKF equations (Thrun, Burgard & Fox 2005, *Probabilistic Robotics*, table 3.3); the
back end that uses them is ``fusion.backends.gaussian``.
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from typing import Protocol

import numpy as np

from fusion.errors import ObservationError

__all__ = [
    "PoseGaussian",
    "Linearised",
    "Linearisable",
    "NotLinearisable",
    "Updated",
    "wrap",
    "predicted",
    "kalman_update",
    "iterated_update",
    "check_covariance",
]

TWO_PI = 2.0 * math.pi


def wrap(angle):
    """An angle (or array) brought into [−π, π)."""
    return (np.asarray(angle, dtype=np.float64) + math.pi) % TWO_PI - math.pi


@dataclass(frozen=True)
class PoseGaussian:
    """Mean (x m, y m, heading rad in [0, 2π)) and 3 × 3 covariance; never changed in place."""

    mean: np.ndarray
    cov: np.ndarray

    @property
    def x(self) -> float:
        return float(self.mean[0])

    @property
    def y(self) -> float:
        return float(self.mean[1])

    @property
    def heading(self) -> float:
        return float(self.mean[2])


class NotLinearisable(ObservationError):
    """A reading the Gaussian model cannot linearise at the mean (for example a marker at range 0)."""


@dataclass(frozen=True)
class Linearised:
    """A reading linearised at a pose: ν = z − h(pose) (angles wrapped), H = ∂h/∂pose, R."""

    innovation: np.ndarray  # (m,)
    jacobian: np.ndarray  # (m, 3)
    noise: np.ndarray  # (m, m)


class Linearisable(Protocol):
    """A reading as a measurement h(pose) + noise that the Gaussian filter linearises.

    ``rows_independent``: the rows are separate measurements with independent errors (the beams of a scan),
    each gated on its own before the reading's joint gate; ``iterate``: relinearise at each new estimate
    (Gauss–Newton); ``reliability``: the sensor's own, against which a discounted reading's is measured."""

    rows_independent: bool
    iterate: bool
    reliability: float

    def linearise(self, pose: np.ndarray, rows: np.ndarray | None = None) -> Linearised:
        """At ``pose``, for the rows kept (all when None); raises ``NotLinearisable`` with the reason."""


def check_covariance(cov, what: str = "covariance") -> np.ndarray:
    """A 3 × 3 covariance as float64, or ``ObservationError`` saying what is wrong with it: not 3 × 3, not
    finite, not symmetric, or not positive definite (a Cholesky factorisation fails)."""
    try:
        c = np.asarray(cov, dtype=np.float64)
    except (TypeError, ValueError):
        raise ObservationError(f"the {what} must be a 3 × 3 matrix of numbers, got {cov!r}") from None
    if c.shape != (3, 3):
        raise ObservationError(f"the {what} must be 3 × 3 (x, y, heading), got shape {c.shape}")
    if not np.isfinite(c).all():
        raise ObservationError(f"the {what} holds a value that is not a finite number")
    if not np.allclose(c, c.T, rtol=1e-9, atol=1e-12):
        raise ObservationError(f"the {what} is not symmetric: entry (1, 2) is {c[0, 1]:g}, entry (2, 1) {c[1, 0]:g}")
    try:
        np.linalg.cholesky(c)
    except np.linalg.LinAlgError:
        low = float(np.linalg.eigvalsh(c).min())
        raise ObservationError(
            f"the {what} is not positive definite (smallest eigenvalue {low:.3g}); every variance must be > 0 and "
            "every correlation inside (−1, 1)"
        ) from None
    return c


def predicted(
    belief: PoseGaussian, forward: float, left: float, turn: float, var_xy: float, var_heading: float
) -> PoseGaussian:
    """The belief after a move of ``forward``, ``left`` (m, in the frame at its start) and ``turn`` (rad), with
    translation variance ``var_xy`` per axis and heading variance ``var_heading`` added in the world frame."""
    x, y, h = belief.mean
    c, s = math.cos(h), math.sin(h)
    mean = np.array([x + c * forward - s * left, y + s * forward + c * left, (h + turn) % TWO_PI])
    jac = np.array([[1.0, 0.0, -s * forward - c * left], [0.0, 1.0, c * forward - s * left], [0.0, 0.0, 1.0]])
    cov = jac @ belief.cov @ jac.T + np.diag([var_xy, var_xy, var_heading])
    return PoseGaussian(mean, _symmetric(cov))


@dataclass(frozen=True)
class Updated:
    """An update's result: the belief after it, and its gate figures at the prior mean."""

    belief: PoseGaussian
    nis: float  # normalised innovation squared νᵀ S⁻¹ ν
    dof: int  # rows of the measurement (χ² degrees of freedom)
    log_fit: float  # log of the linearised reading's expected contour: ½ log(det R / det S) − NIS / 2


def kalman_update(belief: PoseGaussian, lin: Linearised, weight: float = 1.0) -> Updated:
    """One EKF update (Joseph form).  ``weight`` in (0, 1] scales the reading's information (R / weight): a
    discounted reading counts for that share of itself."""
    post, r, s, s_inv = _corrected(belief, lin, weight)
    nu = lin.innovation
    nis = float(nu @ s_inv @ nu)
    return Updated(post, nis, len(nu), _log_fit(r, s, nis))


def iterated_update(
    belief: PoseGaussian, model: Linearisable, rows, weight: float = 1.0, iterations: int = 5, tol: float = 1e-4
) -> Updated:
    """The iterated EKF (Gauss–Newton on prior and reading): x_{i+1} = x̄ + K_i (ν_i − H_i (x̄ − x_i)), with ν_i
    and H_i taken at x_i, until the step is below ``tol`` or after ``iterations``: each step is the plain update of
    the reading linearised at x_i, its innovation carried back to x̄.  The gate figures are those of the first
    linearisation (at the prior mean), as the gate tests the reading against the prediction.  ``tol``: 0.1 mm and
    0.1 mrad, far below any sensor's noise."""
    first = kalman_update(belief, model.linearise(belief.mean, rows), weight)
    post = first.belief
    for _ in range(iterations - 1):
        x = post.mean
        lin = model.linearise(x, rows)
        offset = belief.mean - x
        offset[2] = wrap(offset[2])
        post = _corrected(belief, Linearised(lin.innovation - lin.jacobian @ offset, lin.jacobian, lin.noise), weight)[
            0
        ]
        step = post.mean - x
        step[2] = wrap(step[2])
        if float(np.abs(step).max()) < tol:
            break
    return Updated(post, first.nis, first.dof, first.log_fit)


def _corrected(belief: PoseGaussian, lin: Linearised, weight: float):
    """The belief corrected by ``lin`` (gain, mean, Joseph-form covariance), with R / weight, S and S⁻¹."""
    r = lin.noise / weight
    h = lin.jacobian
    p = belief.cov
    s = h @ p @ h.T + r
    try:
        s_inv = np.linalg.inv(s)
    except np.linalg.LinAlgError:
        raise NotLinearisable("the innovation covariance is singular; the reading cannot be weighed") from None
    gain = p @ h.T @ s_inv
    mean = belief.mean + gain @ lin.innovation
    mean[2] %= TWO_PI
    ik = np.eye(3) - gain @ h
    cov = ik @ p @ ik.T + gain @ r @ gain.T
    return PoseGaussian(mean, _symmetric(cov)), r, s, s_inv


def _log_fit(r: np.ndarray, s: np.ndarray, nis: float) -> float:
    """log ∫ N(x; x̄, P) c(x) dx for the linearised reading's contour c (its density scaled to a peak of 1):
    ½ log(det R / det S) − NIS / 2.  The Gaussian side's log p(z | past) on the scale the other back ends use."""
    _, log_det_r = np.linalg.slogdet(r)
    _, log_det_s = np.linalg.slogdet(s)
    return 0.5 * float(log_det_r - log_det_s) - 0.5 * nis


def _symmetric(cov: np.ndarray) -> np.ndarray:
    return 0.5 * (cov + cov.T)
