"""Scene schema for the scanner simulator (YAML files in synthetic_scans/).

All lengths in a scene file are metres; ``output.units`` only chooses the unit
written to the scan file. Azimuths are degrees clockwise from +Y.
"""
from __future__ import annotations

from dataclasses import dataclass, field
from pathlib import Path
from typing import Optional

from ..config import build, choice_field, date_field, load_yaml, rng_field, merge_sets
from ..errors import ConfigError


@dataclass(frozen=True)
class ProjectionScene:
    width: float = rng_field(0.05, 0.01, 0.2, doc="bottom-plate projection beyond the shell outer face, m")
    thickness: float = rng_field(0.008, 0.003, 0.03, doc="plate thickness, m")


@dataclass(frozen=True)
class FoundationScene:
    type: str = choice_field("ringwall", ("ringwall", "berm"))
    outer_offset: float = rng_field(0.3, 0.06, 2.0, doc="ringwall outer face (or berm shoulder) beyond the shell, m")
    berm_slope: float = rng_field(0.5, 0.05, 2.0, doc="berm fall per unit run")


@dataclass(frozen=True)
class OvalityScene:
    amplitude: float = rng_field(0.0, 0.0, 0.2, doc="radius change cos(2(theta-azimuth)) at the base, m")
    azimuth_deg: float = rng_field(0.0, -360.0, 360.0)
    growth: float = rng_field(0.0, -0.01, 0.01, doc="change of the amplitude per m of height (an ovality that grows "
                                                       "toward the top, as an unstiffened top does), m/m")


@dataclass(frozen=True)
class TankScene:
    tag: str = "T-1"
    center: tuple[float, float] = rng_field((0.0, 0.0), -1e4, 1e4, doc="m, in the scene frame")
    diameter: float = rng_field(30.0, 2.0, 120.0, doc="outer diameter of the bottom course, m")
    height: float = rng_field(12.0, 2.0, 30.0, doc="shell height, m")
    base_elevation: float = rng_field(0.45, -5.0, 5.0, doc="unsettled junction elevation, m")
    course_height: float = rng_field(2.4, 0.5, 4.0)
    course_radius_steps: tuple[float, ...] = rng_field([0.0, -0.003, -0.006, -0.008, -0.010], -0.05, 0.05,
                                                       doc="outer radius of course k minus bottom course, m")
    projection: ProjectionScene = field(default_factory=ProjectionScene)
    foundation: FoundationScene = field(default_factory=FoundationScene)
    ovality: OvalityScene = field(default_factory=OvalityScene)

    @property
    def radius(self) -> float:
        return self.diameter / 2.0


@dataclass(frozen=True)
class TiltScene:
    amplitude: float = rng_field(0.0, 0.0, 1.0, doc="half the peak-to-peak planar tilt at the shell, m")
    low_azimuth_deg: float = rng_field(0.0, -360.0, 360.0)


@dataclass(frozen=True)
class ModeScene:
    k: int = rng_field(2, 2, 60)
    amplitude: float = rng_field(0.0, 0.0, 0.5, doc="m")
    phase_deg: float = rng_field(0.0, -360.0, 360.0, doc="azimuth of a crest of cos(k(theta - phase))")


@dataclass(frozen=True)
class DipScene:
    center_deg: float = rng_field(0.0, -360.0, 360.0)
    arc_length: float = rng_field(3.0, 0.2, 100.0, doc="arc length of the dip along the shell, m")
    depth: float = rng_field(0.01, -0.5, 0.5, doc="m; negative makes a bump")


@dataclass(frozen=True)
class SettlementScene:
    uniform: float = rng_field(0.0, -2.0, 2.0, doc="m, added everywhere (negative = settled)")
    tilt: TiltScene = field(default_factory=TiltScene)
    modes: tuple[ModeScene, ...] = ()
    dips: tuple[DipScene, ...] = ()


@dataclass(frozen=True)
class GroundScene:
    elevation: float = rng_field(0.0, -10.0, 10.0, doc="at the tank centre, m")
    slope: tuple[float, float] = rng_field((0.0, 0.0), -1.0, 1.0, doc="fall per unit run along x and y")
    roughness: float = rng_field(0.004, 0.0, 0.05, doc="amplitude of the ground undulation, m")


@dataclass(frozen=True)
class StairScene:
    start_azimuth_deg: float = rng_field(200.0, -360.0, 360.0)
    direction: str = choice_field("cw", ("cw", "ccw"))
    rise_angle_deg: float = rng_field(40.0, 20.0, 60.0)
    width: float = rng_field(0.9, 0.4, 1.5)
    gap: float = rng_field(0.08, 0.02, 0.5, doc="clearance between shell and treads, m")
    first_tread_height: float = rng_field(0.25, 0.1, 1.0, doc="above the ground, m")


@dataclass(frozen=True)
class NozzleScene:
    azimuth_deg: float = rng_field(0.0, -360.0, 360.0)
    height: float = rng_field(0.6, 0.2, 5.0, doc="axis above the junction, m")
    diameter: float = rng_field(0.3, 0.05, 1.5)
    length: float = rng_field(2.0, 0.2, 20.0)
    support: bool = True


@dataclass(frozen=True)
class PoleScene:
    position: tuple[float, float] = rng_field((0.0, 0.0), -1e4, 1e4, doc="m")
    diameter: float = rng_field(0.2, 0.02, 2.0)
    height: float = rng_field(6.0, 0.5, 30.0)


@dataclass(frozen=True)
class BushScene:
    position: tuple[float, float] = rng_field((0.0, 0.0), -1e4, 1e4, doc="m")
    radius: float = rng_field(0.4, 0.05, 3.0)


@dataclass(frozen=True)
class ClutterScene:
    stair: Optional[StairScene] = None
    nozzles: tuple[NozzleScene, ...] = ()
    poles: tuple[PoleScene, ...] = ()
    bushes: tuple[BushScene, ...] = ()
    other_tanks: tuple[TankScene, ...] = ()


@dataclass(frozen=True)
class RegistrationScene:
    translation: float = rng_field(0.0, 0.0, 0.05, doc="1 sigma per axis, m")
    rotation_deg: float = rng_field(0.0, 0.0, 0.05, doc="1 sigma per axis, degrees")


@dataclass(frozen=True)
class BandParams:
    """A second, finer scan over the elevation angles of the tank base (a region scan)."""

    h_step_deg: float = rng_field(0.05, 0.002, 2.0)
    v_step_deg: float = rng_field(0.04, 0.002, 2.0)
    margin_deg: float = rng_field(1.5, 0.1, 20.0, doc="beyond the junction's elevation angles, degrees")


@dataclass(frozen=True)
class StationParams:
    height: float = rng_field(1.5, 0.3, 5.0, doc="instrument above ground, m")
    h_step_deg: float = rng_field(0.1, 0.002, 2.0)
    v_step_deg: float = rng_field(0.1, 0.002, 2.0)
    v_min_deg: float = rng_field(-60.0, -90.0, 0.0)
    v_max_deg: float = rng_field(45.0, 0.0, 90.0)
    range_noise: float = rng_field(0.002, 0.0, 0.05, doc="1 sigma at zero range, m")
    range_noise_per_m: float = rng_field(0.0, 0.0, 0.001, doc="growth of the range sigma, m per m")
    incidence_noise_gain: float = rng_field(0.3, 0.0, 5.0, doc="range sigma x (1 + gain (1/cos(incidence) - 1))")
    angular_noise_deg: float = rng_field(0.0015, 0.0, 0.1)
    mixed_pixel_prob: float = rng_field(0.3, 0.0, 1.0, doc="chance that a return whose footprint spans a depth edge is mixed")
    beam_divergence_mrad: float = rng_field(0.3, 0.0, 10.0, doc="full beam divergence")
    beam_exit_diameter: float = rng_field(0.004, 0.0, 0.05, doc="m")
    max_range: float = rng_field(80.0, 5.0, 500.0)
    registration: RegistrationScene = field(default_factory=RegistrationScene)
    band: Optional[BandParams] = None
    crease_mixed_prob: float = rng_field(0.0, 0.0, 1.0, doc="chance that a return whose footprint straddles the "
                                                             "shell/plate crease is mixed (range between the two)")
    edge_mixed_prob: float = rng_field(0.0, 0.0, 1.0, doc="chance that a return whose footprint straddles the "
                                                           "projection's outer edge (plate top, step face, "
                                                           "foundation) is mixed")


@dataclass(frozen=True)
class StationScene:
    position: Optional[tuple[float, float]] = rng_field(None, -1e4, 1e4, doc="m")
    azimuth_deg: Optional[float] = rng_field(None, -360.0, 360.0)
    distance_from_shell: float = rng_field(10.0, 1.0, 200.0)
    overrides: dict = field(default_factory=dict)


@dataclass(frozen=True)
class StationsScene:
    common: StationParams = field(default_factory=StationParams)
    ring_count: int = rng_field(5, 0, 16, doc="stations evenly spread around the tank")
    ring_start_deg: float = rng_field(15.0, -360.0, 360.0)
    ring_distance: float = rng_field(10.0, 1.0, 200.0, doc="from the shell, m")
    extra: tuple[StationScene, ...] = ()


@dataclass(frozen=True)
class OutputScene:
    format: str = choice_field("las14", ("las14", "las12", "laz", "ply", "xyz", "npy"))
    units: str = choice_field("m", ("m", "ft", "us_ft"))
    georef_offset: tuple[float, float, float] = rng_field((0.0, 0.0, 0.0), -1e8, 1e8, doc="added to the written "
                                                                                            "coordinates, output units")
    chunk_rays: int = rng_field(2_000_000, 10_000, 50_000_000)
    station_ids: bool = True  # false: a merged cloud (point source id 0 in LAS/LAZ; no station column otherwise)
    scale: float = rng_field(1e-4, 1e-6, 0.1, doc="coordinate resolution in file units: the LAS/LAZ scale "
                                                   "factor; ASCII keeps the decimals it implies")


@dataclass(frozen=True)
class Scene:
    name: str = "scene"
    terminal: str = "Invented terminal"
    survey_date: str = date_field("2026-06-15")
    seed: int = rng_field(1, 0, 2**63 - 1)
    density: float = rng_field(1.0, 1e-4, 1000.0, doc="multiplies the ray count (angular steps / sqrt)")
    tank: TankScene = field(default_factory=TankScene)
    settlement: SettlementScene = field(default_factory=SettlementScene)
    ground: GroundScene = field(default_factory=GroundScene)
    clutter: ClutterScene = field(default_factory=ClutterScene)
    stations: StationsScene = field(default_factory=StationsScene)
    output: OutputScene = field(default_factory=OutputScene)


def load_scene(path, sets=()) -> Scene:
    """Load and validate a scene YAML file, with optional (key, value) overrides."""
    path = Path(path)
    data = merge_sets(load_yaml(path), sets)
    return scene_from_mapping(data, str(path))


def scene_from_mapping(data: dict, source: str = "scene") -> Scene:
    scene = build(Scene, data, "", source)
    for i, st in enumerate(scene.stations.extra):
        if st.position is None and st.azimuth_deg is None:
            raise ConfigError(f"{source}: 'stations.extra[{i}]' needs a position or an azimuth_deg")
        build(StationParams, st.overrides, f"stations.extra[{i}].overrides", source)
    if scene.stations.ring_count == 0 and not scene.stations.extra:
        raise ConfigError(f"{source}: 'stations.ring_count' is 0 and 'stations.extra' is empty: no scanner stations")
    return scene
