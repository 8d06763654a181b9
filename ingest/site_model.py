"""Site model: array planes, single-axis trackers, sensor planes and each array's irradiance source.

A plant rarely has one plane. Each inverter here has one or more *arrays* (MPPT inputs or
string groups), each with its DC capacity and its plane; a plane is fixed (tilt, azimuth),
horizontal, or a single-axis tracker. Each irradiance sensor declares its plane. From
that, every array gets its **irradiance source**, chosen in this order of preference:

1. ``poa_same_plane``: a plane-of-array sensor in the array's own plane (measured POA,
   used as read);
2. ``ghi_transposed``: a horizontal (GHI) sensor, split into beam and diffuse with the
   DIRINT decomposition (Perez et al. 1992) and transposed to the array's plane with the Perez et
   al. (1990) sky-diffuse model (pvlib);
3. ``poa_other_plane_transposed``: a POA sensor in another plane, turned back into GHI, DNI
   and DHI with GTI-DIRINT (Marion 2015, pvlib ``gti_dirint``) and transposed to the
   array's plane with Perez (1990).

Modelled clear-sky irradiance is never a PR source: it only serves clear-sky cross-checks.
The sensors considered are those the configuration assigns to the array
(``[[inverters.arrays]]``: ``poa_sensor`` / ``ghi_sensor``) and then to its inverter.

This module is pure configuration logic (no physics, no I/O): :mod:`analytics.irradiance`
computes the irradiance, ``heliaudit.site_irradiance`` wires both into the daily job.
"""

from __future__ import annotations

from dataclasses import dataclass

from analytics.labels import SOURCE_LABELS

#: Irradiance source codes, best first (stored per inverter and day as ``irradiance_basis``).
IRRADIANCE_BASES = ("poa_same_plane", "ghi_transposed", "poa_other_plane_transposed")
#: The published models behind each code, for results and the computation record.
BASIS_METHODS = {k: SOURCE_LABELS[k]
                 for k in ("poa_same_plane", "ghi_transposed", "poa_other_plane_transposed")}
PLANE_KINDS = ("fixed", "single_axis")
#: Two fixed planes within this tilt / azimuth difference count as the same plane. [°]
SAME_PLANE_TOL_DEG = 1.0


@dataclass(frozen=True)
class Plane:
    """A module plane: fixed (tilt, azimuth; tilt 0 = horizontal) or a single-axis tracker.

    Tracker fields follow :func:`pvlib.tracking.singleaxis`: axis tilt and azimuth, the
    rotation limit ``max_angle_deg``, ``backtrack`` and the ground coverage ratio ``gcr``.
    """

    kind: str = "fixed"
    tilt_deg: float = 0.0
    azimuth_deg: float = 180.0
    id: str = ""  # name in [[planes]], "" for an inline plane
    axis_tilt_deg: float = 0.0
    axis_azimuth_deg: float = 180.0
    max_angle_deg: float = 60.0
    backtrack: bool = True
    gcr: float = 0.35

    @property
    def is_tracker(self) -> bool:
        return self.kind == "single_axis"

    def same_as(self, other: Plane) -> bool:
        """True if a sensor in ``other`` measures the irradiance of this plane."""
        if self.is_tracker or other.is_tracker:
            return self.is_tracker and other.is_tracker and self._tracker_key() == other._tracker_key()
        if abs(self.tilt_deg - other.tilt_deg) > SAME_PLANE_TOL_DEG:
            return False
        if max(self.tilt_deg, other.tilt_deg) <= SAME_PLANE_TOL_DEG:
            return True  # both horizontal: azimuth is meaningless
        d = abs((self.azimuth_deg - other.azimuth_deg + 180.0) % 360.0 - 180.0)
        return d <= SAME_PLANE_TOL_DEG

    def _tracker_key(self) -> tuple:
        return (round(self.axis_tilt_deg, 1), round(self.axis_azimuth_deg % 360, 1),
                round(self.max_angle_deg, 1), self.backtrack, round(self.gcr, 3))

    def label(self) -> str:
        """Plain-language description, e.g. ``fixed 30° tilt, 180° azimuth``."""
        name = f" '{self.id}'" if self.id else ""
        if self.is_tracker:
            return (f"single-axis tracker{name} (axis {self.axis_tilt_deg:g}° tilt, "
                    f"{self.axis_azimuth_deg:g}° azimuth, ±{self.max_angle_deg:g}°, "
                    f"{'backtracking' if self.backtrack else 'no backtracking'}, "
                    f"GCR {self.gcr:g})")
        if self.tilt_deg <= SAME_PLANE_TOL_DEG:
            return f"horizontal{name}"
        return f"fixed{name} {self.tilt_deg:g}° tilt, {self.azimuth_deg:g}° azimuth"


HORIZONTAL = Plane(kind="fixed", tilt_deg=0.0, azimuth_deg=180.0, id="horizontal")


@dataclass(frozen=True)
class Array:
    """One MPPT input or string group of an inverter: DC capacity, plane, irradiance source."""

    id: str
    p_dc_kwp: float
    plane: Plane
    poa_sensor: str | None = None  # assigned to the array itself (else the inverter's)
    ghi_sensor: str | None = None
    irradiance_basis: str = ""  # one of IRRADIANCE_BASES, chosen by choose_source
    irradiance_sensor: str = ""  # the sensor that basis reads


def choose_source(plane: Plane, poa_candidates: list[tuple[str, Plane]],
                  ghi_candidates: list[str]) -> tuple[str, str] | None:
    """``(basis, sensor_id)`` for an array in ``plane``, in the module's order of preference.

    ``poa_candidates`` are ``(sensor_id, sensor_plane)`` in the order assigned (array first,
    then inverter); ``ghi_candidates`` the GHI sensor ids likewise. None if there is none.

    Examples
    --------
    >>> p30 = Plane(tilt_deg=30.0)
    >>> choose_source(p30, [("POA10", Plane(tilt_deg=10.0))], ["GHI1"])
    ('ghi_transposed', 'GHI1')
    >>> choose_source(p30, [("POA10", Plane(tilt_deg=10.0)), ("POA30", p30)], [])
    ('poa_same_plane', 'POA30')
    """
    for sid, sp in poa_candidates:
        if sp.same_as(plane):
            return "poa_same_plane", sid
    if ghi_candidates:
        return "ghi_transposed", ghi_candidates[0]
    if poa_candidates:
        return "poa_other_plane_transposed", poa_candidates[0][0]
    return None


def inverter_basis(arrays) -> str:
    """One code for an inverter: its arrays' common basis, or the distinct ones joined by '+'.

    Examples
    --------
    >>> a = Array("a", 1.0, Plane(), irradiance_basis="poa_same_plane")
    >>> b = Array("b", 1.0, Plane(), irradiance_basis="ghi_transposed")
    >>> inverter_basis([a, a]), inverter_basis([a, b])
    ('poa_same_plane', 'poa_same_plane+ghi_transposed')
    """
    out: list[str] = []
    for a in arrays:
        if a.irradiance_basis not in out:
            out.append(a.irradiance_basis)
    return "+".join(out)


def is_simple(inverter, site_plane: Plane) -> bool:
    """True when the inverter's irradiance is its own POA sensor's reading, as read.

    That is one array (or several in one plane) with a same-plane POA sensor, the sensor
    being the inverter's ``poa_sensor``: the store's inverter frame then already holds the
    array irradiance and nothing needs to be modelled.
    """
    return all(a.irradiance_basis == "poa_same_plane" and a.irradiance_sensor == inverter.poa_sensor
               and a.plane.same_as(site_plane) for a in inverter.arrays)
