"""Observer groups: named sets of points (a list, a plane grid or a sphere of directions),
and their Geometry: the points, or the fixed directions and distances the far-field
approximation uses."""

from __future__ import annotations

import dataclasses

import numpy as np
import pandas as pd

from .constants import C
from .errors import ObserverError


@dataclasses.dataclass(frozen=True, eq=False)
class Geometry:
    """How a group's points see a source, built once per group and run. Near field (far
    False): targets (P, 3) are the points, m. Far field: targets are the unit directions
    from origin_m (3,) to the points, distance_m (P,) their distances from it."""

    far: bool
    targets: np.ndarray
    origin_m: np.ndarray
    distance_m: np.ndarray | None = None

    def light_delay_s(self, positions_m) -> np.ndarray:
        """(M, P) time light takes from positions_m (M, 3) to each point (far field: R₀
        minus the position's projection on the direction, over c)."""
        if self.far:
            projected = (positions_m - self.origin_m) @ self.targets.T
            return (self.distance_m[None, :] - projected) / C
        offset = self.targets[None, :, :] - positions_m[:, None, :]
        return np.sqrt(np.einsum("mpi,mpi->mp", offset, offset)) / C

    def origins_m(self) -> np.ndarray:
        """origin_m repeated per point (P, 3), contiguous, as the far-field kernel takes it."""
        return np.ascontiguousarray(np.broadcast_to(self.origin_m, self.targets.shape))


@dataclasses.dataclass(frozen=True, eq=False)
class ObserverGroup:
    """points_m (P, 3); origin_m (3,): where far-field directions are seen from (the
    sphere's center, else the coordinate origin); theta_rad, phi_rad (P,) for spheres."""

    name: str
    kind: str
    points_m: np.ndarray
    origin_m: np.ndarray
    theta_rad: np.ndarray | None = None
    phi_rad: np.ndarray | None = None

    @property
    def n_points(self) -> int:
        return int(self.points_m.shape[0])

    def far_geometry(self):
        """(directions (P, 3), distances_m (P,)) from origin_m to each point."""
        offset = self.points_m - self.origin_m
        distance = np.sqrt(np.einsum("ij,ij->i", offset, offset))
        if np.any(distance == 0.0):
            point = int(np.flatnonzero(distance == 0.0)[0])
            raise ObserverError(f"observer group '{self.name}', point {point}: the far-field "
                                "approximation needs a point away from the origin it is seen "
                                "from")
        return offset / distance[:, None], distance

    def geometry(self, far_field: bool) -> Geometry:
        """The group as a source sees it: its points, or with far_field its directions and
        distances from origin_m."""
        if not far_field:
            return Geometry(False, self.points_m, self.origin_m)
        directions, distance = self.far_geometry()
        return Geometry(True, directions, self.origin_m, distance)

    def table(self) -> pd.DataFrame:
        """SPEC's observers table for this group."""
        frame = pd.DataFrame({
            "observer": self.name,
            "point": np.arange(self.n_points, dtype=np.int64),
            "x": self.points_m[:, 0], "y": self.points_m[:, 1], "z": self.points_m[:, 2]})
        if self.kind == "sphere":
            frame["theta"] = self.theta_rad
            frame["phi"] = self.phi_rad
        return frame


PERPENDICULAR_TOLERANCE = 1e-6  # largest |û·v̂| of a plane's axes; beyond it, an error


def plane_axes(u, v) -> tuple[np.ndarray, np.ndarray]:
    """The unit vectors (û, v̂) of a plane's axes u, v (3,), or a ValueError saying in plain
    words what is wrong (a zero or non-finite vector, axes not perpendicular)."""
    axes = []
    for what, vector in (("u", u), ("v", v)):
        vector = np.asarray(vector, dtype=float)
        scale = np.max(np.abs(vector)) if vector.size else 0.0
        if not (np.isfinite(scale) and scale > 0.0):
            raise ValueError(f"plane {what} = {vector.tolist()} has no direction")
        vector = vector / scale  # no underflow in the norm of a tiny vector
        axes.append(vector / np.linalg.norm(vector))
    cosine = float(abs(axes[0] @ axes[1]))
    if cosine > PERPENDICULAR_TOLERANCE:
        raise ValueError(f"plane u and v are not perpendicular (|cos| of their angle is "
                         f"{cosine:.3g}, more than {PERPENDICULAR_TOLERANCE:g})")
    return axes[0], axes[1]


def point_count(config) -> int:
    """Number of points of the group an ObserverConfig describes (without building it)."""
    if config.kind == "points":
        return len(config.points_m)
    if config.kind == "plane":
        return int(config.shape[0]) * int(config.shape[1])
    return int(config.theta_rad[2]) * int(config.phi_rad[2])


def build_group(config) -> ObserverGroup:
    """The ObserverGroup described by an ObserverConfig."""
    origin = np.zeros(3)
    if config.kind == "points":
        points = np.asarray(config.points_m, dtype=float).reshape(-1, 3)
        if points.shape[0] == 0:
            raise ObserverError(f"observer group '{config.name}' has no points")
        return ObserverGroup(config.name, "points", points, origin)
    center = np.asarray(config.center_m, dtype=float)
    if config.kind == "plane":
        try:
            u, v = plane_axes(config.u, config.v)
        except ValueError as exc:
            raise ObserverError(f"observer group '{config.name}': {exc}") from None
        n_u, n_v = config.shape
        a = np.linspace(-0.5, 0.5, n_u) * config.size_m[0] if n_u > 1 else np.zeros(1)
        b = np.linspace(-0.5, 0.5, n_v) * config.size_m[1] if n_v > 1 else np.zeros(1)
        aa, bb = np.meshgrid(a, b, indexing="ij")  # point = i_u * n_v + i_v
        points = center + aa.reshape(-1, 1) * u + bb.reshape(-1, 1) * v
        return ObserverGroup(config.name, "plane", points, origin)
    theta = np.linspace(config.theta_rad[0], config.theta_rad[1], config.theta_rad[2])
    phi = np.linspace(config.phi_rad[0], config.phi_rad[1], config.phi_rad[2])
    tt, pp = np.meshgrid(theta, phi, indexing="ij")  # point = i_theta * n_phi + i_phi
    tt = tt.ravel()
    pp = pp.ravel()
    directions = np.stack([np.sin(tt) * np.cos(pp), np.sin(tt) * np.sin(pp), np.cos(tt)], axis=1)
    points = center + config.radius_m * directions
    return ObserverGroup(config.name, "sphere", points, center, theta_rad=tt, phi_rad=pp)
