"""Parameters of the snow column (the ``[snow]`` section), with defaults and their sources."""

from __future__ import annotations

import hashlib
from typing import Annotated, ClassVar, Literal

import numpy as np
from pydantic import Field

from regionmap.settings import Settings

__all__ = [
    "SnowParams",
    "PARAM_NAMES",
    "PARAM_INDEX",
    "MAX_LAYERS_LIMIT",
    "N_SOIL",
    "SOIL_THICKNESS_M",
]

MAX_LAYERS_LIMIT = 80  #: hard upper bound on layers per cell (array size)
N_SOIL = 4  #: soil layers below the snow
SOIL_THICKNESS_M = (0.8, 0.4, 0.2, 0.1)  #: soil layer thickness, deepest first [m]


class SnowParams(Settings):
    """Settings of the column model. Units in the names; sources beside each default.

    Values tagged [mem] were recalled, not re-read from the source; "ours" marks choices of
    this model (thresholds a practitioner would recognise, not published constants).
    """

    section: ClassVar[str] = "snow"

    # layering
    max_layers: Annotated[int, Field(ge=10, le=MAX_LAYERS_LIMIT)] = (
        50  #: layers per cell (about 50 hold a season's distinct layers; ours)
    )
    new_layer_max_m: float = 0.02  #: new snow starts layers of at most 2 cm (ours)
    merge_depth_frac: float = 0.1  #: merged layers may be up to this share of their depth (ours)
    snow_event_gap_h: float = 6.0  #: dry hours that end a deposition event (ours)
    # new snow
    new_snow_density_model: Literal["hedstrom1998", "vionnet2012"] = "vionnet2012"
    new_snow_grain_mm: float = (
        0.3  #: fresh-snow grain size (Vionnet et al. 2012 use ~0.1-0.4 [mem])
    )
    # compaction: Anderson 1976 / Jordan 1991 [mem]
    compaction_eta0_pa_s: float = 3.6e6  #: Jordan (1991), Eq. 34 [mem]
    compaction_c_t_per_k: float = 0.08
    compaction_c_rho_m3_kg: float = 0.021
    settling_rate0_per_s: float = 2.778e-6
    settling_rho_d_kg_m3: float = 100.0
    # conduction and ground
    conductivity_model: Literal["calonne2011", "sturm1997"] = "calonne2011"
    soil_conductivity_w_m_k: float = (
        1.5  #: moist frozen soil ~1-2 (Oke 1987, Boundary Layer Climates, Table 2.1 [mem])
    )
    soil_heat_capacity_j_m3_k: float = 2.0e6  #: moist soil ~2-3 MJ m-3 K-1 (Oke 1987 [mem])
    deep_ground_temperature_k: float = 274.15  #: fixed temperature below 1.5 m of soil (ours)
    soil_water_kg_m3: float = 150.0  #: soil water that freezes (15 % by volume, ours)
    soil_freezing_range_k: float = 1.0  #: it freezes between 0 and -1 degC (ours)
    # surface energy balance
    emissivity: float = 0.98  #: snow emissivity [mem]
    roughness_m: float = 0.001  #: z0 = z0h over snow (~1 mm, common practice [mem])
    stable_floor_frac: float = 0.3  #: share of neutral exchange kept in very stable air (ours)
    wind_min_m_s: float = 0.5  #: wind floor in the bulk formulas (ours)
    newton_iterations: int = 6  #: safeguarded Newton steps on the skin temperature
    #: absorbed shortwave taken at the skin (near-infrared share, ours); the rest penetrates
    sw_surface_frac: float = 0.5
    # albedo: Douville et al. 1995 [mem]
    albedo_min: float = 0.5
    albedo_max: float = 0.85
    albedo_dry_decay_per_day: float = 0.008
    albedo_wet_efold_per_day: float = 0.24
    albedo_refresh_per_kg_m2: float = 0.035
    # liquid water
    irreducible_pore_frac: float = 0.05  #: retention share of pore volume ([mem], bucket schemes)
    pond_pore_frac: float = 0.3  #: retention above a barrier (ours, mimics Wever et al. 2014)
    barrier_density_kg_m3: float = 600.0  #: layers this dense hold water back (ours)
    capillary_ratio: float = 2.0  #: coarse/fine grain ratio of a capillary barrier (ours)
    #: liquid volume share that makes a refrozen layer a crust: the "wet" class (Fierz et al.
    #: 2009, liquid water content classes: wet 3-8 %)
    crust_wet_frac: float = 0.03
    #: wet snow the surface's refreezing front freezes within this time of its start is the
    #: crust: a night's refreeze (ours)
    crust_refreeze_window_h: float = 12.0
    rain_crust_min_kg_m2: float = 2.0  #: rain of an event that can leave a rain crust (ours)
    rain_crust_min_share: float = 0.5  #: and its share of the event's precipitation (ours)
    # crusts
    crust_min_thickness_m: float = 0.005  #: a crust counts from 0.5 cm (ours)
    crust_min_hardness: float = (
        4.0  #: and from hand hardness P (crusts P-I: Jamieson 2006, Rev. Geophys. 44 [mem])
    )
    # dry metamorphism (Colbeck 1983 regimes; Marbouty 1980 growth)
    gradient_round_k_m: float = 10.0  #: rounding below (Colbeck 1983)
    facet_rate_per_day: float = 0.3  #: ours
    round_rate_per_day: float = 0.1  #: ours
    kinetic_growth_m_s: float = 1.04e-9  #: Marbouty (1980) maximum rate [mem]
    depth_hoar_min_grain_mm: float = 1.5  #: ours (Fierz et al. 2009: DH typically 1-5 mm)
    near_surface_depth_m: float = 0.10  #: near-surface zone (Birkeland 1998 [mem])
    # surface hoar (growth: Hachikubo 2001; survival: surface_hoar.surface_hoar_survival)
    sh_wind_max_m_s: float = 3.5  #: grows at cell winds up to 3.5 m s-1 (Hachikubo 2001)
    #: wind spares it up to this friction velocity (ours, within the 0.07-0.25 m s-1 drift
    #: thresholds of fresh snow, Li & Pomeroy 1997 [mem])
    sh_keep_ustar_m_s: float = 0.15
    #: and destroys it from this one (ours, where older snow starts to drift, Li & Pomeroy
    #: 1997 [mem])
    sh_destroy_ustar_m_s: float = 0.35
    sh_shield_kg_m2: float = (
        10.0  #: burying snow that shields it from the wind (~10 cm of storm snow, ours)
    )
    sh_destroy_sw_w_m2: float = 150.0  #: absorbed shortwave that destroys it (ours)
    sh_density_kg_m3: float = 100.0  #: ours
    sh_min_mass_kg_m2: float = 0.02  #: smallest mass kept as a buried layer (0.2 mm, ours)
    # wind transport (regionmap.snow.wind_transport)
    #: move snow from exposed to sheltered cells of each zone (false: no transport)
    wind_transport: bool = True
    #: fetch over which saltation builds up on an exposed cell: of the order of a few hundred
    #: metres (Takeuchi 1980, J. Glaciol. 26(94) [mem]; ours)
    transport_fetch_m: Annotated[float, Field(gt=0)] = 300.0
    #: cells within +-1 deg of zero upwind slope neither lose nor gain (ours)
    transport_neutral_sx_deg: Annotated[float, Field(ge=0)] = 1.0
    #: wind-packed snow 350-400 kg m-3 (Cuffey & Paterson 2010, The Physics of Glaciers,
    #: 4th ed., Table 2.1 [mem])
    wind_packed_density_kg_m3: Annotated[float, Field(ge=50, le=600)] = 350.0
    #: grains broken and rounded in saltation: fine, 0.2-0.5 mm (Fierz et al. 2009 size
    #: classes; ours)
    wind_packed_grain_mm: Annotated[float, Field(gt=0)] = 0.3
    # events and diagnostics
    event_gap_h: float = 6.0  #: rain / freezing-rain dry hours that end an event (ours)
    event_min_kg_m2: float = 0.1  #: hourly amount that counts for an event (ours)
    threshold_mode: Literal["relative", "absolute"] = (
        "relative"  #: Monti et al. 2014 relative thresholds, or absolute ones
    )
    depth_hoar_min_cm: Annotated[float, Field(ge=0, le=50)] = (
        2.0  #: depth hoar counts as present from this thickness
    )
    #: a weak layer of concern lies under a slab this deep (lower end of the critical depth
    #: window, Schweizer & Jamieson 2007 [mem])
    pwl_min_depth_m: float = 0.18
    pwl_min_thickness_m: float = (
        0.005  #: of at least 0.5 cm of persistent grains (buried SH at any thickness; ours)
    )
    pwl_min_grain_mm: float = (
        1.0  #: with grains of at least 1 mm ("coarse", Fierz et al. 2009; ours)
    )

    def as_array(self) -> np.ndarray:
        """All settings as a float64 vector in :data:`PARAM_NAMES` order (for the kernel)."""
        d = self.model_dump()
        d["new_snow_density_model"] = 0.0 if self.new_snow_density_model == "hedstrom1998" else 1.0
        d["conductivity_model"] = 0.0 if self.conductivity_model == "calonne2011" else 1.0
        d["threshold_mode"] = 1.0 if self.threshold_mode == "relative" else 0.0
        return np.array([float(d[n]) for n in PARAM_NAMES], dtype=np.float64)

    def fingerprint(self) -> str:
        """A short stable hash of the settings (stored in state.nc)."""
        return hashlib.sha256(self.as_array().tobytes()).hexdigest()[:16]


PARAM_NAMES: tuple[str, ...] = tuple(SnowParams.model_fields)
PARAM_INDEX: dict[str, int] = {n: i for i, n in enumerate(PARAM_NAMES)}

# Integer positions in the kernel parameter vector, as module constants the compiled code can
# read (``P_<NAME>``; e.g. ``P_MAX_LAYERS``).
for _name, _i in PARAM_INDEX.items():
    globals()["P_" + _name.upper()] = _i
del _name, _i
