"""Test helper: one solve of many chains the way production solves them.

:func:`corridor.steps.respond.solve_model` builds a
:class:`~corridor.network.response.ChainBatch`, factorises it in a
:class:`~corridor.network.response.ChainSystem` and solves; so does this.
"""

from corridor.network.response import ChainBatch, ChainSystem


def solve_chains(segment_length_m, series_impedance_ohm_per_m, shunt_admittance_s_per_m,
                 segment_emf_v, chain_start, node_shunt_admittance_s=None, segment_break=None,
                 start_termination_admittance_s=None, end_termination_admittance_s=None):
    """Node voltages and segment currents of the chains (a ChainSolution)."""
    batch = ChainBatch.from_arrays(
        segment_length_m, series_impedance_ohm_per_m, shunt_admittance_s_per_m, chain_start,
        node_shunt_admittance_s, segment_break, start_termination_admittance_s,
        end_termination_admittance_s)
    return ChainSystem(batch).solve(segment_emf_v)
