"""Depth of investigation (DOI) of a 1D model.

Two measures:

* ``cumulative_sensitivity_doi``: after Christiansen & Auken (2012), "A global
  measure for depth of investigation", Geophysics 77(4), WB171-WB177. The
  error-normalised Jacobian with respect to ln(rho) is averaged over the N
  data, ``S_j = (1/N) sum_i |J_ij| / s_i``, and accumulated from the bottom of
  the model upwards, ``C(z) = sum of S_j over the part of the column below z``
  (each layer's sensitivity spread uniformly over its thickness; the
  half-space's at its top). The DOI is the depth where ``C`` falls to a
  threshold. With this normalisation ``C(z)`` bounds the mean absolute data
  change, in standard errors per datum, caused by changing every layer below
  ``z`` by up to one unit of ln(rho) (a factor e); dividing by N keeps the
  DOI from deepening merely because more gates were recorded. Our
  normalisation is our own (per layer, not the paper's), so the paper's
  threshold is not quoted; 0.8 is calibrated against truth on the empymod
  suite of tests/test_invert_doi.py and the demo day (docs/inversion.md).
  Valid only in the linearisation about the final model: far from the wire it
  claimed depth the model gets wrong.
* ``two_reference_doi``: Oldenburg & Li (1999), "Estimating depth of
  investigation in DC resistivity and IP surveys", Geophysics 64(2),
  403-416. ``R(z) = (m_A(z) - m_B(z)) / (m_A^ref - m_B^ref)`` from two
  inversions with different reference models; the DOI is the top of the
  deepest run of layers (reaching the bottom of the model) where ``R``
  exceeds a cut-off (0.2, calibrated like the threshold above), so a poorly
  resolved thin surface layer does not end the search.

The station default takes the shallower of the two
(:func:`tem.invert.station.station_doi`).

A DOI is one depth; it cannot say that a layer above it is filled by the
regularisation rather than the data (e.g. the lower part of a resistive salt
layer over a conductor: inductive data barely see a resistor's interior, and
the roughness penalty ramps the conductor's top up into it).
``model_resolution`` gives the model resolution matrix of the final smooth
model, ``R = (J^T W J + mu Q)^-1 J^T W J`` with ``Q`` the regularisation's
quadratic form (Menke 2012, "Geophysical Data Analysis: Discrete Inverse
Theory", 3rd ed., ch. 4; Aster, Borchers & Thurber 2013, "Parameter
Estimation and Inverse Problems", 2nd ed., sec. 4.4). Its diagonal is the
fraction of a layer's value that the data, not the regularisation, decide;
the station result carries it per layer (``StationResult.resolution``).
"""
from __future__ import annotations

import numpy as np

__all__ = ["cumulative_sensitivity", "cumulative_sensitivity_doi", "two_reference_doi",
           "model_resolution"]


def cumulative_sensitivity(J, std, thickness):
    """Summed error-normalised sensitivity per layer and its bottom-up cumulation.

    Parameters
    ----------
    J : ndarray (N_data, M)
        Jacobian with respect to ln(rho) of the M layers (last = half-space).
    std : ndarray (N_data,)
        Data standard errors.
    thickness : ndarray (M-1,)
        Layer thicknesses, m.

    Returns
    -------
    S : ndarray (M,)
        ``(1/N) sum_i |J_ij| / s_i`` per layer.
    C_top : ndarray (M,)
        Cumulative sensitivity of the column from each layer top downwards.
    """
    J = np.asarray(J, float)
    S = np.mean(np.abs(J) / np.asarray(std, float)[:, None], axis=0)
    C_top = np.cumsum(S[::-1])[::-1]
    return S, C_top


def cumulative_sensitivity_doi(J, std, thickness, threshold=0.8):
    """DOI (m) where the bottom-up cumulative sensitivity falls to ``threshold``.

    Within a layer, ``C`` varies linearly with depth (uniform spreading). If
    even the whole column below the first layer top exceeds ``threshold`` at
    the top of the half-space, the DOI is the top of the half-space (the mesh
    is too shallow to show where sensitivity ends; the caller should deepen it).
    """
    h = np.asarray(thickness, float)
    S, C_top = cumulative_sensitivity(J, std, h)
    ztop = np.concatenate([[0.0], np.cumsum(h)])
    M = S.size
    # C at the top of the half-space is S[-1]; walk upwards
    if C_top[-1] >= threshold:
        return float(ztop[-1])
    for j in range(M - 2, -1, -1):
        if C_top[j] >= threshold:
            # inside layer j: C(z) = C_top[j+1] + S[j] * (ztop[j+1] - z) / h[j]
            frac = (threshold - C_top[j + 1]) / S[j] if S[j] > 0 else 0.0
            return float(ztop[j + 1] - frac * h[j])
    return 0.0


def two_reference_doi(m_a, m_b, mref_a, mref_b, thickness, cutoff=0.2):
    """Oldenburg & Li (1999) DOI index and the depth where it exceeds ``cutoff``.

    Parameters
    ----------
    m_a, m_b : ndarray (M,)
        ln(rho) of two inversions that differ only in their reference models.
    mref_a, mref_b : float or ndarray (M,)
        The two reference models, ln(rho).
    thickness : ndarray (M-1,), m

    Returns
    -------
    doi : float, m
        Depth (interpolated between layer centres) where the index rises above
        ``cutoff`` for the last time going down (the top of the half-space if
        the bottom layer is still below the cut-off).
    R : ndarray (M,)
        The index per layer.
    """
    ma, mb = np.asarray(m_a, float), np.asarray(m_b, float)
    den = np.broadcast_to(np.asarray(mref_a, float) - np.asarray(mref_b, float), ma.shape)
    R = np.abs(ma - mb) / np.abs(den)
    ztop = np.concatenate([[0.0], np.cumsum(np.asarray(thickness, float))])
    under = np.flatnonzero(R <= cutoff)
    if under.size == 0:
        return 0.0, R
    if under[-1] == R.size - 1:
        return float(ztop[-1]), R
    j = int(under[-1]) + 1       # top of the run of layers, down to the bottom, above the cut-off
    # interpolate between layer centres j-1 and j
    zc = np.concatenate([ztop[:-1] + 0.5 * np.diff(ztop), [ztop[-1]]])
    r0, r1 = R[j - 1], R[j]
    f = (cutoff - r0) / (r1 - r0) if r1 != r0 else 0.0
    return float(zc[j - 1] + f * (zc[j] - zc[j - 1])), R


def model_resolution(J, std, R, mu, ref_weight=0.0):
    """Model resolution matrix ``(J^T W J + mu (R^T R + ref_weight I))^-1 J^T W J``.

    Parameters
    ----------
    J : ndarray (N_data, M)
        Jacobian with respect to ln(rho) at the final model.
    std : ndarray (N_data,)
        Data standard errors (``W = diag(1 / std**2)``).
    R : ndarray or sparse (K, M)
        Roughness operator of the final step (reweighted, with focusing).
    mu, ref_weight : float
        The final trade-off parameter and the reference-model weight.

    Returns
    -------
    ndarray (M, M)
        Row ``j`` is the averaging kernel of layer ``j``: in the linearisation
        about the final model, ``m_est = R m_true + (I - R) m_ref`` (Aster et
        al. 2013, sec. 4.4); the diagonal is 1 for a layer the data decide
        alone and 0 for one the regularisation fills.
    """
    Jw = np.asarray(J, float) / np.asarray(std, float)[:, None]
    G = Jw.T @ Jw
    RtR = R.T @ R
    RtR = RtR.toarray() if hasattr(RtR, "toarray") else np.asarray(RtR, float)
    H = G + mu * (RtR + ref_weight * np.eye(G.shape[0]))
    try:
        return np.linalg.solve(H, G)
    except np.linalg.LinAlgError:
        return np.linalg.pinv(H) @ G
