"""A smooth location surface as a model term (setting ``location_surface``).

The surface over the sales' coordinates is a plane (x and y) plus N × N Gaussian bumps
centred on a grid of the coordinates' quantiles, each as wide as the grid's spacing: a
regression spline in two dimensions (a radial-basis surface; e.g. Wood, *Generalized
Additive Models*, 2017, §5.5, from memory) fitted by the same least squares as every other
term, so its coefficients carry ordinary standard errors and the valuation reads the
subject's location through it. Unpenalised on purpose: a few bumps, chosen by the user,
keep the fit a plain regression. A bump with fewer than :data:`MIN_SALES` fitting sales
within its width is left out (its coefficient would rest on a handful of sales).

Everything that depends on the fitting sales (the origin and scale of the coordinates, the
bumps' centres and width) is fixed in :class:`LocationBasis` at fit time, so subjects and
comparables are placed on the same surface.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

EARTH_RADIUS_KM = 6371.0088     # the IUGG mean radius
MIN_SALES = 5      # common practice, no source: a bump needs a few sales under it


@dataclass(frozen=True)
class LocationBasis:
    """The surface's columns, fixed at fit time. ``origin`` (x₀, y₀) and ``scale`` turn the
    coordinates into working units (degrees first to local kilometres around the
    origin); ``centres`` (m, 2) and ``width`` are in working units."""

    x_column: str
    y_column: str
    coordinates: str
    origin: tuple[float, float]
    scale: float
    centres: np.ndarray
    width: float

    @property
    def names(self) -> list[str]:
        return ["location: x", "location: y"] + [
            f"location: bump {i + 1}" for i in range(len(self.centres))]

    def working(self, x: np.ndarray, y: np.ndarray) -> np.ndarray:
        """(n, 2) coordinates in working units."""
        return _working(np.asarray(x, float), np.asarray(y, float), self.coordinates,
                        self.origin, self.scale)

    def columns(self, x: np.ndarray, y: np.ndarray) -> np.ndarray:
        """The design block (n, 2 + m): the working x and y, then each bump's height."""
        p = self.working(x, y)
        return np.column_stack([p, _bumps(p, self.centres, self.width)])

    def distance(self, x1, y1, x2, y2) -> np.ndarray:
        """Distances between points in the coordinates' own units (kilometres for degrees)."""
        a, b = self.working(x1, y1), self.working(x2, y2)
        return np.sqrt(((a - b) ** 2).sum(axis=1)) * self.scale


def _working(x, y, coordinates, origin, scale) -> np.ndarray:
    if coordinates == "degrees":
        # local equirectangular kilometres about the origin: ample for a county
        lat0 = np.radians(origin[1])
        px = EARTH_RADIUS_KM * np.cos(lat0) * np.radians(x - origin[0])
        py = EARTH_RADIUS_KM * np.radians(y - origin[1])
    else:
        px, py = x - origin[0], y - origin[1]
    return np.column_stack([px, py]) / scale


def _bumps(p: np.ndarray, centres: np.ndarray, width: float) -> np.ndarray:
    d2 = ((p[:, None, :] - centres[None, :, :]) ** 2).sum(axis=2)
    return np.exp(-0.5 * d2 / (width * width))


def build_location(x: np.ndarray, y: np.ndarray, per_side: int, x_column: str,
                   y_column: str, coordinates: str = "projected") -> LocationBasis:
    """The basis for the fitting sales' coordinates: per_side × per_side candidate bumps on
    the grid of the coordinates' quantiles ((i + ½)/N), those with at least MIN_SALES sales
    within one width kept. Width: the mean of the grid's steps in x and y."""
    x, y = np.asarray(x, float), np.asarray(y, float)
    origin = (float(np.mean(x)), float(np.mean(y)))
    raw = _working(x, y, coordinates, origin, 1.0)
    scale = float(np.sqrt(np.mean((raw ** 2).sum(axis=1)))) or 1.0
    p = raw / scale
    q = (np.arange(per_side) + 0.5) / per_side
    gx, gy = np.quantile(p[:, 0], q), np.quantile(p[:, 1], q)
    span = np.ptp(p, axis=0)
    width = float(np.mean(span / per_side)) or 1.0
    centres = np.array([(a, b) for b in gy for a in gx])
    near = (((p[:, None, :] - centres[None, :, :]) ** 2).sum(axis=2) <= width * width)
    centres = centres[near.sum(axis=0) >= MIN_SALES]
    return LocationBasis(x_column, y_column, coordinates, origin, scale, centres, width)
