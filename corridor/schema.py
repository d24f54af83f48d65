"""Canonical field names, units, defaults and valid ranges of corridor's inputs.

The config maps the user's attribute names onto these names; the readers
validate each value against its spec. The README's Inputs tables are
generated from this module (:mod:`corridor.settings_tables`). The kinds
themselves, plugins' included, are in the registry (:mod:`corridor.registry`).
"""

from __future__ import annotations

import math
from functools import partial

from corridor.settings import Spec

#: An input field's spec: the one :class:`corridor.settings.Spec` (plugins import it
#: under this name).
FieldSpec = Spec


#: The asset kinds corridor ships with; plugins add more (:mod:`corridor.registry`).
BUILTIN_ASSET_KINDS = ("pipeline", "fence", "rail", "telecom")
#: Default of an optional number whose absence means "not known" (never a value).
_UNKNOWN = float("nan")


def _number_list(value, allowed: tuple[float, ...] | None = None):
    """Rule of a per-circuit field: one number, or numbers separated by ';'."""
    parts = [p.strip() for p in str(value).replace(",", ";").split(";") if p.strip()]
    try:
        numbers = [float(p) for p in parts]
    except ValueError:
        return value, f"{value!r} is not a number or a ';'-separated list of numbers"
    if any(not math.isfinite(n) for n in numbers):
        return value, f"{value!r} holds a value that is not a finite number"
    if allowed is not None and any(n not in allowed for n in numbers):
        return value, (f"{value!r}: each value must be one of"
                       f" {', '.join(f'{a:+g}' for a in allowed)}")
    return value, None
TERMINATIONS = ("open", "grounded", "continuing")

LINE_FIELDS: tuple[FieldSpec, ...] = (
    FieldSpec("line_id", "str", doc="Id of the power line; features sharing an id are one"
              " electrical line (docs/methods.md §18.1)."),
    FieldSpec("voltage_kv", "float", low=1.0, high=1200.0,
              doc="Nominal phase-to-phase voltage [kV]."),
    FieldSpec("arrangement", "str",
              doc="Name of the tower and conductor arrangement in the arrangements file."),
    FieldSpec("load_current_a", "float", default=None, low=0.0, high=10000.0,
              doc="Load current per circuit [A rms]."),
    FieldSpec("residual_current_pct", "float", default=None, low=0.0, high=50.0,
              doc="Residual (unbalance) current as a percentage of the load current [%]."),
    FieldSpec("fault_current_start_ka", "float", default=None, low=0.0, high=300.0,
              doc="Single line-to-earth fault current for a fault at the line's first vertex"
                  " [kA rms]."),
    FieldSpec("fault_current_end_ka", "float", default=None, low=0.0, high=300.0,
              doc="Single line-to-earth fault current for a fault at the line's last vertex"
                  " [kA rms]; the sources behind both ends are fitted to the two values"
                  " (docs/methods.md §8.1)."),
    FieldSpec("source_x_over_r_start", "float", default=10.0, low=0.1, high=100.0,
              doc="X/R ratio of the source behind the line's first vertex (common"
                  " practice, from memory: transmission sources 10-30)."),
    FieldSpec("source_x_over_r_end", "float", default=10.0, low=0.1, high=100.0,
              doc="X/R ratio of the source behind the line's last vertex."),
    FieldSpec("source_z0_over_z1_start", "float", default=1.0, low=0.05, high=20.0,
              doc="Zero- to positive-sequence impedance ratio of the source behind the"
                  " line's first vertex (common practice, from memory: about 0.5-3)."),
    FieldSpec("source_z0_over_z1_end", "float", default=1.0, low=0.05, high=20.0,
              doc="Zero- to positive-sequence impedance ratio of the source behind the"
                  " line's last vertex."),
    FieldSpec("clearing_time_s", "float", default=None, low=0.01, high=10.0,
              doc="Fault clearing time [s]."),
    FieldSpec("high_reliability", "bool", default=False,
              doc="True for a high-reliability line in the sense of the ITU-T Directives."),
    # Normal-load loading per circuit and against the other lines (docs/methods.md §2.3, §8).
    # Missing means unknown: the coupling takes the worst case over it.
    FieldSpec("circuit_load_current_a", "str", default="", check=_number_list,
              doc="Load current of each circuit, one number or one per circuit separated by"
                  " ';' [A rms]; empty: load_current_a on every circuit."),
    FieldSpec("circuit_flow_direction", "str", default="",
              check=partial(_number_list, allowed=(1.0, -1.0)),
              doc="Power-flow direction of each circuit against the digitised direction,"
                  " +1 or -1, one value or one per circuit separated by ';'; empty: +1."),
    FieldSpec("circuit_phase_offset_deg", "str", default="", check=_number_list,
              doc="Phase-angle offset of each circuit against the line's own [deg], one value"
                  " or one per circuit separated by ';'; empty: 0."),
    FieldSpec("flow_direction", "float", default=_UNKNOWN, low=-1.0, high=1.0,
              doc="Power-flow direction of the line against its digitised direction (+1 or -1)"
                  " in the common reference; empty: unknown (worst case)."),
    FieldSpec("phase_offset_deg", "float", default=_UNKNOWN, low=-360.0, high=360.0,
              doc="Phase-angle offset of the line against the common reference [deg], e.g."
                  " 30 across a transformer; empty: unknown (worst case)."),
)

COMMON_ASSET_FIELDS: tuple[FieldSpec, ...] = (
    FieldSpec("asset_id", "str", doc="Unique id of the asset."),
    FieldSpec("height_m", "float", low=-10.0, high=100.0,
              doc="Height of the conductor above ground [m]; negative is depth of burial."),
    FieldSpec("start_termination", "str", choices=TERMINATIONS,
              doc="How the asset ends at its first vertex."),
    FieldSpec("end_termination", "str", choices=TERMINATIONS,
              doc="How the asset ends at its last vertex."),
    FieldSpec("termination_resistance_ohm", "float", low=0.0, high=1e6,
              doc="Resistance to earth of a grounded end [Ω]."),
)

BUILTIN_KIND_FIELDS: dict[str, tuple[FieldSpec, ...]] = {
    "pipeline": (
        FieldSpec("diameter_m", "float", low=0.01, high=3.0, doc="Outer diameter [m]."),
        FieldSpec("wall_thickness_m", "float", low=0.001, high=0.1, doc="Wall thickness [m]."),
        FieldSpec("coating_resistance_ohm_m2", "float", low=1.0, high=1e9,
                  doc="Specific coating resistance [Ω·m²]."),
        FieldSpec("steel_relative_permeability", "float", low=1.0, high=2000.0,
                  doc="Relative permeability of the pipe steel [-]."),
        FieldSpec("cathodic_protection", "bool",
                  doc="True where the pipeline is cathodically protected."),
        FieldSpec("coating_type", "str", choices=("pe", "fbe", "bitumen"),
                  doc="Coating family, selects the coating-stress limit."),
        FieldSpec("dc_current_density_a_per_m2", "float", default=_UNKNOWN, low=0.0, high=1000.0,
                  doc="DC (cathodic-protection) current density at a holiday or coupon, where"
                      " the operator has it [A/m²]; for ISO 18086's combined criteria."),
        FieldSpec("dc_on_potential_v", "float", default=_UNKNOWN, low=-5.0, high=1.0,
                  doc="DC on-potential of the pipe against a Cu/CuSO4 reference [V], where the"
                      " operator has it (recorded; ISO 18086's 10 V variant is a limit-set"
                      " override)."),
    ),
    "fence": (
        FieldSpec("post_type", "str", choices=("metal", "wood"), doc="Post material."),
        FieldSpec("post_spacing_m", "float", low=0.5, high=50.0, doc="Distance between posts [m]."),
        FieldSpec("post_resistance_ohm", "float", default=_UNKNOWN, low=0.1, high=float("inf"),
                  doc="Resistance to earth of one post, any material [Ω]; inf for wires on"
                      " insulators; empty: typical for the material (metal 100 Ω, wet wood"
                      " 5 kΩ, from memory; docs/methods.md §10)."),
        FieldSpec("wire_count", "int", low=1, high=20, doc="Number of longitudinal wires [-]."),
        FieldSpec("wire_radius_m", "float", low=0.0005, high=0.02, doc="Wire radius [m]."),
    ),
    "rail": (
        FieldSpec("rail_resistance_ohm_per_km", "float", low=0.001, high=5.0,
                  doc="Series resistance of the track (rails in parallel) [Ω/km]."),
        FieldSpec("ballast_resistance_ohm_km", "float", low=0.1, high=1000.0,
                  doc="Track-to-earth (ballast) resistance [Ω·km]."),
    ),
    "telecom": (
        FieldSpec("screening_factor", "float", low=0.01, high=1.0,
                  doc="Sheath screening factor applied to the induced EMF [-]."),
        FieldSpec("cable_grounding", "str", choices=("one_end", "both_ends", "isolated"),
                  doc="Where the conductor pair is grounded."),
        FieldSpec("conductor_radius_m", "float", low=0.0001, high=0.05,
                  doc="Equivalent radius of the cable [m]."),
        FieldSpec("sheath_resistance_ohm_per_km", "float", default=_UNKNOWN, low=0.001, high=1000.0,
                  doc="Longitudinal resistance of the metal sheath [Ω/km]; given, the screening"
                      " factor is computed (ITU-T K.14)."),
        FieldSpec("sheath_grounding", "str", default="",
                  choices=("", "one_end", "both_ends", "isolated"),
                  doc="Where the sheath is grounded; empty: as cable_grounding."),
        FieldSpec("sheath_radius_m", "float", default=0.01, low=0.001, high=0.1,
                  doc="Mean radius of the sheath [m]."),
    ),
}

SOIL_FIELDS: tuple[FieldSpec, ...] = (
    FieldSpec("soil_resistivity_ohm_m", "float", default=_UNKNOWN, low=0.1, high=1e5,
              doc="Homogeneous soil resistivity [Ω·m]; a two-layer polygon may give"
                  " top_resistivity_ohm_m instead (one of the two is required)."),
    # Two-layer soil and the soil at the asset's depth (docs/methods.md §9); empty: homogeneous.
    FieldSpec("top_resistivity_ohm_m", "float", default=_UNKNOWN, low=0.1, high=1e5,
              doc="Resistivity of the top layer of a two-layer soil [Ω·m]."),
    FieldSpec("top_thickness_m", "float", default=_UNKNOWN, low=0.01, high=1e4,
              doc="Thickness of the top layer [m]."),
    FieldSpec("bottom_resistivity_ohm_m", "float", default=_UNKNOWN, low=0.1, high=1e5,
              doc="Resistivity below the top layer [Ω·m]."),
    FieldSpec("local_resistivity_ohm_m", "float", default=_UNKNOWN, low=0.1, high=1e5,
              doc="Resistivity at the asset's depth, for holiday current density, foot"
                  " resistance, electrodes and earth potential [Ω·m]; empty: the top layer."),
)

GROUND_FIELDS: tuple[FieldSpec, ...] = (
    FieldSpec("asset_id", "str", doc="Asset the item belongs to; the point snaps to the"
              " asset's nearest node (within one segment length, else rejected). An item"
              " naming an asset that is in no asset layer, or was rejected, is rejected."),
    FieldSpec("item", "str", choices=("ground", "insulating_joint", "gap"),
              doc="Ground to earth, or a series break (insulating joint, gate, gap)."),
    FieldSpec("resistance_ohm", "float", default=10.0, low=0.01, high=1e6,
              doc="Resistance to earth of a ground [Ω]; unused for breaks. A text field is"
                  " read as a number ('5.0'); a ground without a valid value is rejected."),
)

SUBSTATION_FIELDS: tuple[FieldSpec, ...] = (
    FieldSpec("fault_current_ka", "float", low=0.0, high=300.0,
              doc="Earth-fault current the substation's grounding grid discharges into the"
                  " soil [kA rms]; give the whole single line-to-earth fault current for a"
                  " conservative screen (docs/methods.md §18.4)."),
    FieldSpec("grid_resistance_ohm", "float", low=0.001, high=1000.0,
              doc="Resistance to remote earth of the grounding grid [Ω]; the earth"
                  " potential rise of the grid is fault current times this resistance."),
    FieldSpec("clearing_time_s", "float", default=None, low=0.01, high=10.0,
              doc="Clearing time of a fault at the substation [s]; empty: the"
                  " [line_defaults] clearing_time_s."),
)

#: Fields of the towers layer (each point is projected onto its line).
TOWER_FIELDS: tuple[FieldSpec, ...] = (
    FieldSpec("line_id", "str", doc="Line the tower belongs to; the point is projected onto"
              " the line. A tower naming an unknown or rejected line is rejected."),
)

#: The optional id field of the grounds, towers and substations layers, by layer role: messages and
#: rejected.csv name a feature by it.
FEATURE_ID_FIELDS: dict[str, FieldSpec] = {
    "grounds": FieldSpec("ground_id", "str", default="",
                         doc="Id used in messages; empty: the feature's layer FID as GDAL"
                             " reports it, e.g. fid:12."),
    "towers": FieldSpec("tower_id", "str", default="",
                        doc="Id used in messages; empty: the feature's layer FID."),
    "substations": FieldSpec("substation_id", "str", default="",
                             doc="Id used in messages; empty: the feature's layer FID."),
}

#: Built-in defaults per asset kind. Values are typical of the trade; each
#: carries its provenance. The config's ``[defaults.<kind>]`` overrides them.
BUILTIN_KIND_DEFAULTS: dict[str, dict[str, object]] = {
    "pipeline": {
        "height_m": -1.5,  # typical depth of cover 1-2 m (common practice)
        "start_termination": "continuing",  # pipelines run on past the data (common practice)
        "end_termination": "continuing",
        "termination_resistance_ohm": 10.0,  # common practice
        "diameter_m": 0.508,  # 20 in line pipe (common practice)
        "wall_thickness_m": 0.0095,  # common practice
        "coating_resistance_ohm_m2": 1.0e5,  # 3LPE/FBE 1e4-1e6 (docs/methods.md §5, from memory)
        "steel_relative_permeability": 300.0,  # docs/methods.md §1 (from memory)
        "cathodic_protection": True,  # common practice for coated steel pipelines
        "coating_type": "pe",
    },
    "fence": {
        "height_m": 1.0,  # mid-height of a farm fence (common practice)
        "start_termination": "open",
        "end_termination": "open",
        "termination_resistance_ohm": 50.0,  # a driven end post (common practice)
        "post_type": "metal",
        "post_spacing_m": 3.0,  # common practice for farm fences
        "wire_count": 4,
        "wire_radius_m": 0.00125,  # 2.5 mm wire (common practice)
    },
    "rail": {
        "height_m": 0.0,
        "start_termination": "continuing",
        "end_termination": "continuing",
        "termination_resistance_ohm": 1.0,
        "rail_resistance_ohm_per_km": 0.03,  # two UIC60-class rails in parallel (from memory)
        "ballast_resistance_ohm_km": 5.0,  # 2-20 Ω·km for ballasted track (from memory)
    },
    "telecom": {
        "height_m": -0.8,  # direct-buried cable depth (common practice)
        "start_termination": "grounded",
        "end_termination": "grounded",
        "termination_resistance_ohm": 10.0,  # exchange/cabinet earth (common practice)
        "screening_factor": 0.8,  # plain sheath, no armour, typical (from memory)
        "cable_grounding": "both_ends",
        "conductor_radius_m": 0.01,
    },
}


#: Fields whose filled-in defaults run.json and the report list by feature id: the
#: safety-relevant ones (fault current, clearing time, posts, coating, terminations)
#: and the electrical data an OpenStreetMap line runs on by rule (arrangement, circuits).
SAFETY_DEFAULT_FIELDS = (
    "fault_current_start_ka", "fault_current_end_ka", "clearing_time_s", "post_type",
    "coating_type", "coating_resistance_ohm_m2", "start_termination", "end_termination",
    "termination_resistance_ohm", "arrangement", "circuits",
)
