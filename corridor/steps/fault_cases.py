"""Earth-fault cases of the coupling stage: one per (asset, electrical line, faulted phase).

The fault-position scan (:func:`corridor.network.fault_scan.scan_fault_positions`)
keeps the worst voltage over its cases, so a case per faulted phase makes the
result the worst over fault positions *and* faulted phases (issue 14 §2,
docs/methods.md §18.3). Which phase is worst is not known before the scan: near
an asset beside an asymmetric arrangement, the phase nearest the asset gives the
largest EMF on the nearby sections, while a phase far away may give the largest
total over the exposure; the voltage at a point depends on the EMF's
distribution, not on its total alone.

Phases are matched by their label (phase letter and circuit number, e.g. ``B2``)
across the features of one line, which may change tower arrangement.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from corridor.physics import induction
from corridor.steps import faultscan


@dataclass
class FaultCases:
    """Fault cases and the sections of each (one entry per section and phase).

    Attributes
    ----------
    case_asset, case_route, case_label : ndarray, per case
        Asset, electrical line (route) and phase-label index of each case.
    case_base : ndarray of int, per case
        The (asset, route) the case belongs to.
    screening : ndarray of complex, per case
        Σ E / Σ E₀ over the case's sections for its phase (earth wires).
    section : ndarray of int, per entry
        Section of each entry.
    case_of_entry : ndarray of int, per entry
        Case of each entry.
    emf_v_per_a : ndarray of complex, per entry
        The section's EMF for the case's phase per ampere flowing from A to B [V/A].
    """

    case_asset: np.ndarray
    case_route: np.ndarray
    case_label: np.ndarray
    case_base: np.ndarray
    screening: np.ndarray
    section: np.ndarray
    case_of_entry: np.ndarray
    emf_v_per_a: np.ndarray

    def __len__(self) -> int:
        return len(self.case_asset)


def phase_columns(arrangements) -> tuple[list[str], dict[str, np.ndarray]]:
    """Phase labels of every arrangement and, per arrangement, the column of each phase.

    Returns
    -------
    labels : list of str
        ``"<phase><circuit>"`` (``A1``, ``B1``, ..., ``C2``), each once, in the order
        first met over the arrangements sorted by name.
    columns : dict
        Arrangement name -> column of each of its phase conductors (conductor order).
    """
    labels: list[str] = []
    columns: dict[str, np.ndarray] = {}
    for name in sorted(arrangements):
        cols = []
        for c in arrangements[name].conductors:
            if c.circuit < 0:
                continue
            lab = f"{c.phase}{c.circuit + 1}"
            if lab not in labels:
                labels.append(lab)
            cols.append(labels.index(lab))
        columns[name] = np.asarray(cols, np.int64)
    return labels, columns


def fault_cases(sec_asset, sec_route, section_emf_v, section_unscreened_emf_v, present,
                n_route) -> FaultCases:
    """One case per (asset, route, phase) that has any section, and its entries.

    Parameters
    ----------
    sec_asset, sec_route : ndarray of int, per section
        Asset and electrical line of each section.
    section_emf_v, section_unscreened_emf_v : ndarray of complex, (n_sections, n_labels)
        EMF per ampere of each section for a fault on each phase label, with and
        without the earth wires [V/A].
    present : ndarray of bool, (n_sections, n_labels)
        Whether the section's line carries the phase.
    n_route : int
        Number of electrical lines.
    """
    n_sec, n_lab = present.shape
    key = np.asarray(sec_asset, np.int64) * (n_route + 1) + np.asarray(sec_route, np.int64)
    base_ids, base_of_sec = np.unique(key, return_inverse=True)
    base_of_sec = base_of_sec.ravel()
    n_base = len(base_ids)
    has = np.zeros((n_base, n_lab), bool)
    ss, sj = np.nonzero(present)
    has[base_of_sec[ss], sj] = True
    cb, cl = np.nonzero(has)  # cases sorted by (asset, route), then phase
    index = np.full((n_base, n_lab), -1, np.int64)
    index[cb, cl] = np.arange(len(cb))
    screening = np.ones(len(cb), complex)
    for j in range(n_lab):
        rows = np.flatnonzero(has[:, j])
        if len(rows) == 0:
            continue
        # the production screening factor of one phase: a one-column exposure
        ex = induction.exposure_fault_emf(section_emf_v[:, j:j + 1],
                                          section_unscreened_emf_v[:, j:j + 1], base_of_sec,
                                          n_base)
        screening[index[rows, j]] = ex.screening_factor[rows]
    case_of_entry = index[base_of_sec[ss], sj]
    return FaultCases((base_ids[cb] // (n_route + 1)).astype(np.int64),
                      (base_ids[cb] % (n_route + 1)).astype(np.int64), cl.astype(np.int64),
                      cb.astype(np.int64), screening, ss.astype(np.int64), case_of_entry,
                      section_emf_v[ss, sj])


def expand_positions(positions: faultscan.FaultPositions, case_base) -> faultscan.FaultPositions:
    """Fault positions of each (asset, route) repeated for each of its phase cases."""
    b = np.asarray(case_base, np.int64)
    return faultscan.FaultPositions(positions.position_m[b], positions.current_start_a[b],
                                    positions.current_end_a[b], positions.fault_current_a[b])
