"""Chemical weathering indices of soil B horizons, from whole-rock oxides.

Every index is computed from *molar* proportions: the oxide's weight percent divided by
its molar mass (:data:`MOLAR_MASS`). Inputs are weight percent of the carbonate-free B
horizon sample (CaO should be silicate CaO); the functions are pure and vectorised: they
take numbers, numpy arrays or pandas Series and return the same shape, with NaN where an
input is missing or a denominator is zero.

References
----------
.. [NY82] Nesbitt, H.W., Young, G.M. (1982). Early Proterozoic climates and plate motions
   inferred from major element chemistry of lutites. Nature 299, 715-717.
   doi:10.1038/299715a0
.. [H88] Harnois, L. (1988). The CIW index: a new chemical index of weathering.
   Sedimentary Geology 55, 319-322. doi:10.1016/0037-0738(88)90137-6
.. [M92] Maynard, J.B. (1992). Chemistry of modern soils as a guide to interpreting
   Precambrian paleosols. Journal of Geology 100, 279-289 (the name CIA-K; from memory).
.. [ND10] Nordt, L.C., Driese, S.G. (2010). New weathering index improves paleorainfall
   estimates from Vertisols. Geology 38, 407-410. doi:10.1130/G30689.1
.. [SRT02] Sheldon, N.D., Retallack, G.J., Tanaka, S. (2002). Geochemical climofunctions
   from North American soils and application to paleosols across the Eocene-Oligocene
   boundary in Oregon. Journal of Geology 110, 687-696. doi:10.1086/342865
"""

from __future__ import annotations

import numpy as np

#: Molar masses of the oxides [g/mol] (standard atomic weights, rounded to 0.01).
MOLAR_MASS = {
    "sio2": 60.08,
    "tio2": 79.87,
    "al2o3": 101.96,
    "fe2o3": 159.69,
    "mno": 70.94,
    "mgo": 40.30,
    "cao": 56.08,
    "na2o": 61.98,
    "k2o": 94.20,
    "p2o5": 141.94,
}

#: Columns written by :func:`derive_indices`, with the function that computes each.
INDEX_COLUMNS = ("cia", "cia_k", "calmag", "salinization", "bases_alumina", "ca_alumina")


def moles(wt_percent, oxide: str):
    """Molar proportion of an oxide from its weight percent.

    Parameters
    ----------
    wt_percent : float or array_like
        Oxide content [wt%].
    oxide : str
        Oxide key of :data:`MOLAR_MASS`, e.g. ``"al2o3"``.

    Returns
    -------
    float or array_like
        Moles per 100 g of sample [mol/100 g].
    """
    out = _as_float(wt_percent) / MOLAR_MASS[oxide]
    return float(out) if np.ndim(out) == 0 else out


def _as_float(x):
    if hasattr(x, "index") and hasattr(x, "astype"):  # pandas Series keeps its index
        return x.astype("float64")
    return np.asarray(x, dtype="float64")


def _ratio(numerator, denominator):
    """numerator / denominator, NaN where the denominator is zero; scalars stay scalars."""
    with np.errstate(divide="ignore", invalid="ignore"):
        out = numerator / denominator
    if hasattr(out, "where") and hasattr(out, "index"):
        return out.where(denominator != 0)
    out = np.where(denominator != 0, out, np.nan)
    return float(out) if out.ndim == 0 else out


def cia(al2o3_wt, cao_wt, na2o_wt, k2o_wt):
    """Chemical index of alteration (CIA).

    Parameters
    ----------
    al2o3_wt, cao_wt, na2o_wt, k2o_wt : float or array_like
        Oxide contents [wt%]; CaO of silicates only (carbonate-free sample).

    Returns
    -------
    float or array_like
        CIA [dimensionless, 0-100].

    Notes
    -----
    With molar proportions (wt% / molar mass),

    .. math:: \\mathrm{CIA} = 100\\,\\frac{Al_2O_3}{Al_2O_3 + CaO^* + Na_2O + K_2O}

    References
    ----------
    Nesbitt & Young (1982), Nature 299, 715-717 [NY82]_.
    """
    al = moles(al2o3_wt, "al2o3")
    return 100.0 * _ratio(al, al + moles(cao_wt, "cao") + moles(na2o_wt, "na2o")
                          + moles(k2o_wt, "k2o"))


def cia_k(al2o3_wt, cao_wt, na2o_wt):
    """Chemical index of alteration without potassium (CIA-K; the CIW of Harnois 1988).

    Parameters
    ----------
    al2o3_wt, cao_wt, na2o_wt : float or array_like
        Oxide contents [wt%]; CaO of silicates only (carbonate-free sample).

    Returns
    -------
    float or array_like
        CIA-K [dimensionless, 0-100].

    Notes
    -----
    With molar proportions,

    .. math:: \\mathrm{CIA\\text{-}K} = 100\\,\\frac{Al_2O_3}{Al_2O_3 + CaO + Na_2O}

    Sheldon et al. (2002) [SRT02]_ regress mean annual precipitation on it.

    References
    ----------
    Harnois (1988), Sedimentary Geology 55, 319-322 [H88]_; Maynard (1992) [M92]_ for the
    name CIA-K (from memory).
    """
    al = moles(al2o3_wt, "al2o3")
    return 100.0 * _ratio(al, al + moles(cao_wt, "cao") + moles(na2o_wt, "na2o"))


def calmag(al2o3_wt, cao_wt, mgo_wt):
    """CALMAG weathering index of Vertisols.

    Parameters
    ----------
    al2o3_wt, cao_wt, mgo_wt : float or array_like
        Oxide contents [wt%].

    Returns
    -------
    float or array_like
        CALMAG [dimensionless, 0-100].

    Notes
    -----
    With molar proportions,

    .. math:: \\mathrm{CALMAG} = 100\\,\\frac{Al_2O_3}{Al_2O_3 + CaO + MgO}

    References
    ----------
    Nordt & Driese (2010), Geology 38, 407-410 [ND10]_.
    """
    al = moles(al2o3_wt, "al2o3")
    return 100.0 * _ratio(al, al + moles(cao_wt, "cao") + moles(mgo_wt, "mgo"))


def salinization(k2o_wt, na2o_wt, al2o3_wt):
    """Salinization ratio S (potash and soda to alumina).

    Parameters
    ----------
    k2o_wt, na2o_wt, al2o3_wt : float or array_like
        Oxide contents [wt%].

    Returns
    -------
    float or array_like
        S [dimensionless, molar ratio].

    Notes
    -----
    .. math:: S = \\frac{K_2O + Na_2O}{Al_2O_3}

    References
    ----------
    Sheldon, Retallack & Tanaka (2002), Journal of Geology 110, 687-696 [SRT02]_.
    """
    return _ratio(moles(k2o_wt, "k2o") + moles(na2o_wt, "na2o"), moles(al2o3_wt, "al2o3"))


def bases_alumina(cao_wt, mgo_wt, na2o_wt, k2o_wt, al2o3_wt):
    """Bases/alumina ratio B.

    Parameters
    ----------
    cao_wt, mgo_wt, na2o_wt, k2o_wt, al2o3_wt : float or array_like
        Oxide contents [wt%].

    Returns
    -------
    float or array_like
        B [dimensionless, molar ratio].

    Notes
    -----
    .. math:: B = \\frac{CaO + MgO + Na_2O + K_2O}{Al_2O_3}

    The list of bases is from memory; the abstract of [SRT02]_ confirms "molecular ratio
    of bases/alumina".

    References
    ----------
    Sheldon, Retallack & Tanaka (2002), Journal of Geology 110, 687-696 [SRT02]_.
    """
    bases = (moles(cao_wt, "cao") + moles(mgo_wt, "mgo") + moles(na2o_wt, "na2o")
             + moles(k2o_wt, "k2o"))
    return _ratio(bases, moles(al2o3_wt, "al2o3"))


def ca_alumina(cao_wt, al2o3_wt):
    """Calcium/alumina ratio C.

    Parameters
    ----------
    cao_wt, al2o3_wt : float or array_like
        Oxide contents [wt%].

    Returns
    -------
    float or array_like
        C [dimensionless, molar ratio].

    Notes
    -----
    .. math:: C = \\frac{CaO}{Al_2O_3}

    References
    ----------
    Sheldon, Retallack & Tanaka (2002), Journal of Geology 110, 687-696 [SRT02]_.
    """
    return _ratio(moles(cao_wt, "cao"), moles(al2o3_wt, "al2o3"))


def derive_indices(frame):
    """Add the weathering indices to a calibration table.

    Parameters
    ----------
    frame : pandas.DataFrame
        Table with oxide columns ``al2o3_wt``, ``cao_wt``, ``mgo_wt``, ``na2o_wt``,
        ``k2o_wt`` [wt%]; missing columns count as missing values.

    Returns
    -------
    pandas.DataFrame
        A copy of ``frame`` with columns ``cia``, ``cia_k``, ``calmag``,
        ``salinization``, ``bases_alumina``, ``ca_alumina`` [dimensionless]; NaN where
        an input is missing or not a number.
    """
    import pandas as pd

    def col(name):
        if name in frame.columns:
            return pd.to_numeric(frame[name], errors="coerce").astype("float64")
        return pd.Series(np.nan, index=frame.index, dtype="float64")

    al, ca, mg, na, k = (col(f"{o}_wt") for o in ("al2o3", "cao", "mgo", "na2o", "k2o"))
    out = frame.copy()
    out["cia"] = cia(al, ca, na, k)
    out["cia_k"] = cia_k(al, ca, na)
    out["calmag"] = calmag(al, ca, mg)
    out["salinization"] = salinization(k, na, al)
    out["bases_alumina"] = bases_alumina(ca, mg, na, k, al)
    out["ca_alumina"] = ca_alumina(ca, al)
    return out


def map_from_cia_k(cia_k_value):
    """Mean annual precipitation from CIA-K by the Sheldon et al. (2002) climofunction.

    Parameters
    ----------
    cia_k_value : float or array_like
        CIA-K [dimensionless, 0-100].

    Returns
    -------
    float or array_like
        Mean annual precipitation [mm].

    Notes
    -----
    .. math:: P = 221.12\\, e^{0.0197\\,\\mathrm{CIA\\text{-}K}}

    published with R^2 = 0.72 on 126 North American soils. Since CIA-K <= 100 the
    function cannot exceed about 1586 mm. This is the frozen published equation, kept
    here as a reference point; refit refits its own.

    References
    ----------
    Sheldon, Retallack & Tanaka (2002), Journal of Geology 110, 687-696 [SRT02]_.
    """
    out = 221.12 * np.exp(0.0197 * _as_float(cia_k_value))
    return float(out) if np.ndim(out) == 0 else out
