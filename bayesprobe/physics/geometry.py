"""Probe geometry: shape, size and collecting area.

Three convex shapes are supported:

``planar``
    A one-sided disc of radius ``radius`` (area pi r^2), or any flat collector of
    given ``area`` (its equivalent disc radius sqrt(A/pi) is used for sheath
    expansion). Both sides exposed: pass the total area.
``cylindrical``
    A wire of radius ``radius`` and exposed length ``length``; side area
    2 pi r L, plus pi r^2 when ``end_cap`` is True.
``spherical``
    A sphere of radius ``radius``; area 4 pi r^2.

``area`` always overrides the computed area (for example a measured area of a
worn tip); the radius is still needed where the theory depends on r_p / lambda_D.
"""
from __future__ import annotations

import math
from dataclasses import dataclass

__all__ = ["Probe", "GEOMETRIES"]

GEOMETRIES = ("planar", "cylindrical", "spherical")


def _positive(name: str, value: float | None) -> float | None:
    if value is None:
        return None
    try:
        value = float(value)
    except (TypeError, ValueError):
        raise ValueError(f"probe {name} must be a number, got {value!r}") from None
    if not math.isfinite(value) or value <= 0:
        raise ValueError(f"probe {name} must be positive and finite (SI units: m or m^2), got {value!r}")
    return value


@dataclass(frozen=True)
class Probe:
    """A probe's shape and size (SI units: metres, square metres).

    Parameters
    ----------
    geometry : {"planar", "cylindrical", "spherical"}
    radius : float, optional
        Probe radius in m (wire radius for a cylinder). Required except for a
        planar probe given by ``area``.
    length : float, optional
        Exposed wire length in m (cylinder only, required there).
    area : float, optional
        Collecting area in m^2; overrides the area computed from radius/length.
    end_cap : bool
        Cylinder only: count the flat tip (pi r^2) in the area.

    Examples
    --------
    >>> Probe("cylindrical", radius=50e-6, length=5e-3).area   # doctest: +ELLIPSIS
    1.5707963...e-06
    """

    geometry: str = "cylindrical"
    radius: float | None = None
    length: float | None = None
    area_override: float | None = None
    end_cap: bool = False

    def __init__(self, geometry: str = "cylindrical", *, radius: float | None = None,
                 length: float | None = None, area: float | None = None, end_cap: bool = False):
        if geometry not in GEOMETRIES:
            raise ValueError(f"geometry must be one of {', '.join(GEOMETRIES)}, got {geometry!r}")
        radius = _positive("radius", radius)
        length = _positive("length", length)
        area = _positive("area", area)
        if geometry == "planar" and radius is None and area is None:
            raise ValueError("a planar probe needs a radius (disc) or an area")
        if geometry in ("cylindrical", "spherical") and radius is None:
            raise ValueError(f"a {geometry} probe needs a radius")
        if geometry == "cylindrical" and length is None:
            raise ValueError("a cylindrical probe needs a length")
        if geometry == "planar" and radius is None:
            radius = math.sqrt(area / math.pi)
        object.__setattr__(self, "geometry", geometry)
        object.__setattr__(self, "radius", radius)
        object.__setattr__(self, "length", length)
        object.__setattr__(self, "area_override", area)
        object.__setattr__(self, "end_cap", bool(end_cap))

    @property
    def geometric_area(self) -> float:
        """Area computed from radius (and length), m^2."""
        r = self.radius
        if self.geometry == "planar":
            return math.pi * r * r
        if self.geometry == "cylindrical":
            return 2 * math.pi * r * self.length + (math.pi * r * r if self.end_cap else 0.0)
        return 4 * math.pi * r * r

    @property
    def area(self) -> float:
        """Collecting area in m^2 (the override if given)."""
        return self.area_override if self.area_override is not None else self.geometric_area

    def to_dict(self) -> dict:
        return {"geometry": self.geometry, "radius_m": self.radius, "length_m": self.length,
                "area_m2": self.area, "area_given": self.area_override is not None,
                "end_cap": self.end_cap}

    @classmethod
    def from_dict(cls, d: dict) -> "Probe":
        return cls(d["geometry"], radius=d.get("radius_m"), length=d.get("length_m"),
                   area=d["area_m2"] if d.get("area_given") else None, end_cap=d.get("end_cap", False))
