"""Refractive-index models and the built-in materials library.

Public names
------------
Material
    Base class: ``index(wavelength_nm)`` gives N = n + i·k (k ≥ 0 absorbs).
ConstantIndex, CauchyIndex, SellmeierIndex, TabulatedIndex, WaterIndex, AirIndex
    The index models.
load_material_csv
    A user table ``wavelength_nm,n[,k]`` → :class:`TabulatedIndex`.
material_from_spec
    A built-in name, a CSV path or an inline table (as written in a stack
    file) → :class:`Material`.
BUILT_IN
    The built-in library: name → (description, source).

Conventions: wavelength in vacuum, in nanometres; dispersion formulas are
written as published, in micrometres, and converted inside. A table is never
extrapolated (an error names the material and its range); a formula used
outside its published validity range still evaluates, and the caller gets a
warning string from :meth:`Material.range_warnings`.

References
----------
Each built-in entry names its primary source beside its coefficients. The
tabulated data under ``filmcalc/data/materials/`` were converted from the
public-domain (CC0) refractiveindex.info database: Polyanskiy, M. N. (2024),
Refractiveindex.info database of optical constants, Scientific Data 11, 94.
"""

from __future__ import annotations

import csv
import difflib
from importlib import resources
from pathlib import Path

import numpy as np

from .errors import FilmcalcError

__all__ = [
    "Material",
    "ConstantIndex",
    "CauchyIndex",
    "SellmeierIndex",
    "TabulatedIndex",
    "WaterIndex",
    "AirIndex",
    "load_material_csv",
    "material_from_spec",
    "spec_from_text",
    "built_in_material",
    "BUILT_IN",
]


def brief_repr(value, limit=48):
    """``repr(value)`` cut to ``limit`` characters, for quoting a user's value in a message."""
    text = repr(value)
    return text if len(text) <= limit else text[:limit - 1] + "…"


def table_path(name, base_dir, what):
    """Where a table file named in a stack file lies: relative to the stack file's folder, never outside it.

    Raises
    ------
    FilmcalcError
        An absolute path, a path through ``..``, or a stack that was not read from a file (no folder).
    """
    path = Path(name)
    if path.is_absolute() or ".." in path.parts:
        raise FilmcalcError(f"{what} {brief_repr(name)}: a file named in a stack file must lie in the stack "
                            "file's folder or below it. Copy the table there and give its name relative to "
                            "the stack file (no absolute path, no '..').")
    if base_dir is None:
        raise FilmcalcError(f"{what} {brief_repr(name)} is a file, but this stack was not read from a file "
                            "(typed or uploaded), so there is no folder to find it in. Open the stack file "
                            "saved next to the table instead, or write the material inline, e.g. {n = 1.47, k = 0}.")
    return Path(base_dir) / path


class Material:
    """A medium with a complex refractive index N(λ) = n + i·k.

    Parameters
    ----------
    name : str
        Name shown to users.
    source : str
        Where the numbers come from (author, year, title), shown to users.
    valid_nm : tuple of float, optional
        Published validity range of the model, nm. Outside it a formula still
        evaluates (with a warning); a table raises :class:`FilmcalcError`.
    spec : str or dict, optional
        How the material was given in a stack file, kept so a stack saves
        back exactly as written.
    """

    extrapolates = True

    def __init__(self, name, source, valid_nm=None, spec=None):
        self.name = name
        self.source = source
        self.valid_nm = None if valid_nm is None else (float(valid_nm[0]), float(valid_nm[1]))
        self.spec = name if spec is None else spec

    def index(self, wavelength_nm):
        """Complex refractive index at the given vacuum wavelengths.

        Parameters
        ----------
        wavelength_nm : array_like
            Vacuum wavelength, nm (> 0).

        Returns
        -------
        numpy.ndarray of complex
            N = n + i·k, same shape as ``wavelength_nm``.
        """
        wl = np.asarray(wavelength_nm, dtype=float)
        if np.any(~np.isfinite(wl)) or np.any(wl <= 0):
            raise FilmcalcError(f"{self.name}: wavelengths must be finite and > 0 nm.")
        if not self.extrapolates:
            self._check_inside(wl)
        return np.asarray(self._index(wl), dtype=complex)

    def _check_inside(self, wl):
        lo, hi = self.valid_nm
        if wl.size and (wl.min() < lo - 1e-9 or wl.max() > hi + 1e-9):
            raise FilmcalcError(
                f"{self.name}: the table covers {lo:g}–{hi:g} nm but "
                f"{wl.min():g}–{wl.max():g} nm was asked for. Narrow the wavelength "
                "range, or give this material a table or formula that covers it."
            )

    def range_warnings(self, wavelength_nm):
        """Warnings for wavelengths outside the published validity range.

        Returns
        -------
        list of str
            Empty when the whole range is covered (or no range is published).
        """
        if self.valid_nm is None or not self.extrapolates:
            return []
        wl = np.asarray(wavelength_nm, dtype=float)
        lo, hi = self.valid_nm
        if wl.size and (wl.min() < lo - 1e-9 or wl.max() > hi + 1e-9):
            return [
                f"{self.name}: its dispersion formula is published for {lo:g}–{hi:g} nm; "
                f"used here at {wl.min():g}–{wl.max():g} nm, so values outside that range "
                "are extrapolated."
            ]
        return []

    def _index(self, wl):  # pragma: no cover - abstract
        raise NotImplementedError

    def __repr__(self):
        return f"{type(self).__name__}({self.name!r})"


class ConstantIndex(Material):
    """The same N = n + i·k at every wavelength."""

    def __init__(self, n, k=0.0, name=None, source="constant value given by the user", spec=None):
        n, k = float(n), float(k)
        if not (np.isfinite(n) and n > 0):
            raise FilmcalcError(f"Refractive index n must be a number > 0 (got {n}).")
        if not (np.isfinite(k) and k >= 0):
            raise FilmcalcError(
                f"Extinction coefficient k must be ≥ 0 (got {k}); filmcalc writes N = n + i·k "
                "with k ≥ 0 for absorbing media (conjugate values from sources that write n − ik)."
            )
        self.n, self.k = n, k
        super().__init__(name or f"n={n:g}" + (f", k={k:g}" if k else ""), source, None,
                         spec if spec is not None else ({"n": n, "k": k} if k else {"n": n}))

    def _index(self, wl):
        return np.full(wl.shape, self.n + 1j * self.k)


class CauchyIndex(Material):
    """Cauchy dispersion n(λ) = A + B/λ² + C/λ⁴ with λ in µm, constant k.

    Parameters
    ----------
    a : float
        A (dimensionless).
    b : float
        B, µm².
    c : float
        C, µm⁴.
    k : float
        Constant extinction coefficient.
    """

    def __init__(self, a, b=0.0, c=0.0, k=0.0, name=None, source="Cauchy coefficients given by the user",
                 valid_nm=None, spec=None):
        self.a, self.b, self.c, self.k = (float(v) for v in (a, b, c, k))
        if not np.all(np.isfinite([self.a, self.b, self.c, self.k])):
            raise FilmcalcError(f"Cauchy coefficients and k must be finite numbers (got {self.a:g}, {self.b:g}, "
                                f"{self.c:g}, k = {self.k:g}).")
        if self.k < 0:
            raise FilmcalcError(f"Extinction coefficient k must be ≥ 0 (got {self.k}).")
        super().__init__(name or f"Cauchy({self.a:g}, {self.b:g}, {self.c:g})", source, valid_nm,
                         spec if spec is not None else {"cauchy": [self.a, self.b, self.c]})

    def _index(self, wl):
        um2 = (wl / 1000.0) ** 2
        return self.a + self.b / um2 + self.c / um2**2 + 1j * self.k


class SellmeierIndex(Material):
    """Sellmeier dispersion n² = A + Σ Bᵢ λ² / (λ² − Cᵢ), λ in µm, k = 0.

    Parameters
    ----------
    b : sequence of float
        Oscillator strengths Bᵢ.
    c : sequence of float
        Resonance terms Cᵢ, µm² (the square of the resonance wavelength).
    a : float
        Constant term A; 1 for the usual form n² − 1 = Σ ….
    """

    def __init__(self, b, c, a=1.0, name=None, source="Sellmeier coefficients given by the user",
                 valid_nm=None, spec=None):
        self.b = np.asarray(b, dtype=float)
        self.c = np.asarray(c, dtype=float)
        self.a = float(a)
        if self.b.shape != self.c.shape or self.b.ndim != 1:
            raise FilmcalcError("Sellmeier: give as many B as C coefficients.")
        if not (np.all(np.isfinite(self.b)) and np.all(np.isfinite(self.c)) and np.isfinite(self.a)):
            raise FilmcalcError("Sellmeier: the coefficients must be finite numbers (not nan or inf).")
        super().__init__(name or "Sellmeier", source, valid_nm,
                         spec if spec is not None else {"sellmeier_b": self.b.tolist(),
                                                         "sellmeier_c": self.c.tolist()})

    def _index(self, wl):
        um2 = (wl[..., None] / 1000.0) ** 2
        n2 = self.a + np.sum(self.b * um2 / (um2 - self.c), axis=-1)
        return np.sqrt(n2.astype(complex))


class TabulatedIndex(Material):
    """n and k tabulated against wavelength, linearly interpolated, never extrapolated."""

    extrapolates = False

    def __init__(self, wavelength_nm, n, k=None, name="table", source="table given by the user", spec=None):
        wl = np.asarray(wavelength_nm, dtype=float)
        n = np.asarray(n, dtype=float)
        k = np.zeros_like(n) if k is None else np.asarray(k, dtype=float)
        if wl.ndim != 1 or wl.size < 2 or n.shape != wl.shape or k.shape != wl.shape:
            raise FilmcalcError(f"{name}: a table needs at least two rows of wavelength_nm, n, k.")
        if not np.all(np.isfinite(wl)) or np.any(wl <= 0):
            raise FilmcalcError(f"{name}: every wavelength in the table must be a finite number > 0 nm.")
        if np.any(np.diff(wl) <= 0):
            raise FilmcalcError(f"{name}: wavelengths in the table must strictly increase.")
        if np.any(n <= 0) or np.any(k < 0) or not np.all(np.isfinite(n + k)):
            raise FilmcalcError(f"{name}: the table needs n > 0 and k ≥ 0 on every row.")
        self.wavelength_nm, self.n, self.k = wl, n, k
        super().__init__(name, source, (wl[0], wl[-1]), spec)

    def _index(self, wl):
        return np.interp(wl, self.wavelength_nm, self.n) + 1j * np.interp(wl, self.wavelength_nm, self.k)


# IAPWS R9-97 coefficients (Harvey, Gallagher & Levelt Sengers 1998, J. Phys.
# Chem. Ref. Data 27, 761, Table 3).
_IAPWS_A = (0.244257733, 9.74634476e-3, -3.73234996e-3, 2.68678472e-4,
            1.58920570e-3, 2.45934259e-3, 0.900704920, -1.66626219e-2)
_IAPWS_UV2 = 0.2292020**2
_IAPWS_IR2 = 5.432937**2


def water_density(temperature_c):
    """Density of air-free liquid water at 101.325 kPa, kg/m³.

    Tanaka, Girard, Davis, Peuto & Bignell (2001), Recommended table for the
    density of water between 0 °C and 40 °C based on recent experimental
    reports, Metrologia 38, 301–309, eq. (1).
    """
    t = np.asarray(temperature_c, dtype=float)
    a1, a2, a3, a4, a5 = -3.983035, 301.797, 522528.9, 69.34881, 999.974950
    return a5 * (1 - (t + a1) ** 2 * (t + a2) / (a3 * (t + a4)))


def water_index_iapws(wavelength_nm, temperature_k, density_kg_m3):
    """Refractive index of water from the IAPWS R9-97 formulation.

    Parameters
    ----------
    wavelength_nm : array_like
        Vacuum wavelength, nm (formulation valid 200–1100 nm).
    temperature_k : float
        Temperature, K.
    density_kg_m3 : float
        Density, kg/m³.

    Returns
    -------
    numpy.ndarray
        Real refractive index.

    References
    ----------
    Harvey, A. H., Gallagher, J. S. & Levelt Sengers, J. M. H. (1998). Revised
    formulation for the refractive index of water and steam as a function of
    wavelength, temperature and density. J. Phys. Chem. Ref. Data 27, 761–774.
    """
    a0, a1, a2, a3, a4, a5, a6, a7 = _IAPWS_A
    rho = density_kg_m3 / 1000.0
    t = temperature_k / 273.15
    lam2 = (np.asarray(wavelength_nm, dtype=float) / 589.0) ** 2
    rhs = rho * (a0 + a1 * rho + a2 * t + a3 * lam2 * t + a4 / lam2 + a5 / (lam2 - _IAPWS_UV2)
                 + a6 / (lam2 - _IAPWS_IR2) + a7 * rho**2)
    return np.sqrt((1 + 2 * rhs) / (1 - rhs))


class WaterIndex(Material):
    """Liquid water at a chosen temperature (IAPWS R9-97, density from Tanaka 2001), k = 0.

    Water's k in the visible is below 1e-8 and is neglected.
    """

    def __init__(self, temperature_c=20.0, name="water", spec=None):
        self.temperature_c = float(temperature_c)
        if not 0.0 <= self.temperature_c <= 40.0:
            raise FilmcalcError(
                f"{name}: temperature_c must lie in 0–40 °C, where the density formula holds "
                f"(got {self.temperature_c:g})."
            )
        source = ("IAPWS R9-97: Harvey, Gallagher & Levelt Sengers 1998, J. Phys. Chem. Ref. Data 27, 761; "
                  "density: Tanaka et al. 2001, Metrologia 38, 301")
        if spec is None:
            spec = name if self.temperature_c == 20.0 else {"name": name, "temperature_c": self.temperature_c}
        super().__init__(name, source + f"; at {self.temperature_c:g} °C", (200.0, 1100.0), spec)

    def _index(self, wl):
        rho = water_density(self.temperature_c)
        return water_index_iapws(wl, self.temperature_c + 273.15, rho) + 0j


class AirIndex(Material):
    """Standard dry air (15 °C, 101.325 kPa, 450 ppm CO₂), Ciddor 1996, k = 0.

    n − 1 = 0.05792105 / (238.0185 − λ⁻²) + 0.00167917 / (57.362 − λ⁻²), λ in µm.
    Ciddor, P. E. (1996). Refractive index of air: new equations for the
    visible and near infrared. Appl. Opt. 35, 1566–1573.
    """

    def __init__(self, name="air", spec=None):
        super().__init__(name, "Ciddor 1996, Appl. Opt. 35, 1566 (standard dry air, 15 °C, 101.325 kPa)",
                         (230.0, 1690.0), spec)

    def _index(self, wl):
        s2 = (1000.0 / wl) ** 2
        return 1 + 0.05792105 / (238.0185 - s2) + 0.00167917 / (57.362 - s2) + 0j


def _sellmeier_um(b, c_um):
    """Sellmeier coefficients published with resonance wavelengths in µm (not squared)."""
    return list(b), [ci**2 for ci in c_um]


def _table(filename, name, source):
    text = resources.files("filmcalc.data.materials").joinpath(filename).read_text()
    wl, n, k = np.loadtxt(text.splitlines(), delimiter=",", skiprows=1, unpack=True)
    return TabulatedIndex(wl, n, k, name=name, source=source)


def _make_tio2(name):
    # Devore 1951 writes n² = 5.913 + 0.2441 / (λ² − 0.0803); rewritten exactly in
    # the Sellmeier form A + B λ²/(λ² − C) with B = 0.2441/0.0803, A = 5.913 − B.
    b = 0.2441 / 0.0803
    return SellmeierIndex([b], [0.0803], a=5.913 - b, name=name,
                          source="Devore 1951, J. Opt. Soc. Am. 41, 416 (rutile, ordinary ray); "
                                 "deposited films are often lower, about 2.2–2.5",
                          valid_nm=(430, 1530))


# name → (description, source, factory(name) → Material)
_LIBRARY = {
    "air": ("standard dry air", lambda nm: AirIndex(nm)),
    "water": ("liquid water; add temperature_c (0–40 °C, default 20)",
              lambda nm, temperature_c=20.0: WaterIndex(temperature_c, name=nm)),
    "soap-solution": (
        "soap-film liquid approximated as water at 20 °C (dilute surfactant changes n by well under "
        "0.01; set n yourself for glycerol-rich solutions)",
        lambda nm, temperature_c=20.0: WaterIndex(temperature_c, name=nm)),
    "fused-silica": ("fused silica / thermal SiO₂", lambda nm: SellmeierIndex(
        *_sellmeier_um([0.6961663, 0.4079426, 0.8974794], [0.0684043, 0.1162414, 9.896161]),
        name=nm, source="Malitson 1965, J. Opt. Soc. Am. 55, 1205 (20 °C)", valid_nm=(210, 6700))),
    "soda-lime-glass": ("window / microscope-slide glass", lambda nm: _table(
        "soda-lime-glass_Rubin1985.csv", nm, "Rubin 1985, Sol. Energy Mater. 12, 275")),
    "silicon": ("crystalline silicon, 300 K", lambda nm: _table(
        "silicon_Green2008.csv", nm, "Green 2008, Sol. Energy Mater. Sol. Cells 92, 1305 (300 K)")),
    "silicon-nitride": ("stoichiometric Si₃N₄ (LPCVD-like; PECVD films vary, about 1.8–2.3)",
                        lambda nm: SellmeierIndex(
                            *_sellmeier_um([3.0249, 40314.0], [0.1353406, 1239.842]), name=nm,
                            source="Luke et al. 2015, Opt. Lett. 40, 4823", valid_nm=(310, 5504))),
    "pmma": ("poly(methyl methacrylate)", lambda nm: SellmeierIndex(
        [1.1819], [0.011313], name=nm,
        source="Sultanova, Kasarova & Nikolov 2009, Acta Phys. Pol. A 116, 585 (20 °C; bulk, "
               "spin-coated films can differ by about 0.01)", valid_nm=(436.8, 1052))),
    "polystyrene": ("polystyrene", lambda nm: SellmeierIndex(
        [1.4435], [0.020216], name=nm,
        source="Sultanova, Kasarova & Nikolov 2009, Acta Phys. Pol. A 116, 585 (20 °C)",
        valid_nm=(436.8, 1052))),
    "photoresist": (
        "generic novolac-type positive resist, Cauchy A = 1.62, B = 0.0135 µm², k = 0; replace with "
        "your resist's data-sheet coefficients",
        lambda nm: CauchyIndex(1.62, 0.0135, 0.0, name=nm,
                               source="representative values (from memory, not a published fit); unexposed "
                                      "resist absorbs below about 450 nm, which k = 0 ignores",
                               valid_nm=(450, 1000))),
    "mineral-oil": (
        "light paraffin / mineral oil, Cauchy A = 1.4630, B = 0.0042 µm² (n_D ≈ 1.475)",
        lambda nm: CauchyIndex(1.4630, 0.0042, 0.0, name=nm,
                               source="representative values (from memory, not a published fit); "
                                      "oils vary by ±0.01, measure yours")),
    "titanium-dioxide": ("rutile TiO₂, ordinary ray", _make_tio2),
    "magnesium-fluoride": ("MgF₂, ordinary ray", lambda nm: SellmeierIndex(
        *_sellmeier_um([0.48755108, 0.39875031, 2.3120353], [0.04338408, 0.09461442, 23.793604]),
        name=nm, source="Dodge 1984, Appl. Opt. 23, 1980 (19 °C, ordinary ray)", valid_nm=(200, 7000))),
    "alumina": ("sapphire / Al₂O₃, ordinary ray", lambda nm: SellmeierIndex(
        *_sellmeier_um([1.4313493, 0.65054713, 5.3414021], [0.0726631, 0.1193242, 18.028251]),
        name=nm, source="Malitson & Dodge 1972, J. Opt. Soc. Am. 62, 1405; formula in Dodge 1986, "
                        "Handbook of Laser Science and Technology IV (20 °C, ordinary ray)",
        valid_nm=(200, 5000))),
    "chromium": ("chromium (bulk constants; thin evaporated films differ)", lambda nm: _table(
        "chromium_Johnson1974.csv", nm, "Johnson & Christy 1974, Phys. Rev. B 9, 5056")),
    "aluminium": ("evaporated aluminium", lambda nm: _table(
        "aluminium_Rakic1995.csv", nm, "Rakić 1995, Appl. Opt. 34, 4755")),
    "silver": ("silver", lambda nm: _table(
        "silver_Johnson1972.csv", nm, "Johnson & Christy 1972, Phys. Rev. B 6, 4370")),
    "gold": ("gold", lambda nm: _table(
        "gold_Johnson1972.csv", nm, "Johnson & Christy 1972, Phys. Rev. B 6, 4370")),
}

BUILT_IN = {name: entry[0] for name, entry in _LIBRARY.items()}


def built_in_material(name, **params):
    """A material from the built-in library by name.

    Raises
    ------
    FilmcalcError
        Unknown name (with the closest names), or a parameter it does not take.
    """
    key = str(name).strip().lower()
    if key not in _LIBRARY:
        close = difflib.get_close_matches(key, list(_LIBRARY), n=3)
        hint = f" Did you mean {', '.join(repr(c) for c in close)}?" if close else ""
        raise FilmcalcError(
            f"Unknown material {brief_repr(name)}.{hint} Built-in materials: {', '.join(_LIBRARY)}. "
            "You can also give a CSV file (wavelength_nm,n,k) or an inline table such as {n = 1.47, k = 0}."
        )
    try:
        return _LIBRARY[key][1](key, **params)
    except TypeError:
        raise FilmcalcError(
            f"Material {key!r} takes no parameters {sorted(params)}; only 'water' and 'soap-solution' "
            "take temperature_c."
        ) from None


def load_material_csv(path, name=None):
    """Read a user table of optical constants.

    Parameters
    ----------
    path : str or path-like
        CSV with a header row naming ``wavelength_nm`` and ``n`` (and
        optionally ``k``); comma, semicolon or tab separated.
    name : str, optional
        Name shown to users; the file's stem by default.

    Returns
    -------
    TabulatedIndex
    """
    path = Path(path)
    name = name or path.stem
    shown = brief_repr(str(path), 80)
    try:
        data = path.read_bytes()
    except (OSError, ValueError) as exc:  # ValueError: a NUL character in the path
        raise FilmcalcError(f"Cannot read material file {shown}: {getattr(exc, 'strerror', None) or exc}.") from None
    if data.startswith((b"\xff\xfe", b"\xfe\xff")):
        text = data.decode("utf-16", errors="replace")
    elif b"\x00" in data:
        raise FilmcalcError(f"Material file {shown} is not a text table (it holds binary data).")
    else:
        try:
            text = data.decode("utf-8-sig")
        except UnicodeDecodeError as exc:
            raise FilmcalcError(f"Material file {shown} is not UTF-8 text (byte {exc.start + 1} is not UTF-8): "
                                "save it again as UTF-8 CSV.") from None
    lines = [ln for ln in text.splitlines() if ln.strip() and not ln.lstrip().startswith("#")]
    if not lines:
        raise FilmcalcError(f"Material file {shown} is empty.")
    try:
        dialect = csv.Sniffer().sniff(lines[0], delimiters=",;\t") if any(d in lines[0] for d in ",;\t") else None
        rows = list(csv.reader(lines, dialect) if dialect else ([ln] for ln in lines))
    except csv.Error as exc:
        raise FilmcalcError(f"Material file {shown} cannot be split into columns ({exc}): write it as "
                            "wavelength_nm,n,k with one row per line.") from None
    header = [h.strip().lower() for h in rows[0]]
    if "wavelength_nm" not in header or "n" not in header:
        raise FilmcalcError(
            f"Material file {shown}: the first line must name the columns wavelength_nm,n[,k] "
            f"(found {brief_repr(rows[0])})."
        )
    iw, i_n = header.index("wavelength_nm"), header.index("n")
    ik = header.index("k") if "k" in header else None
    wl, n, k = [], [], []
    for lineno, row in enumerate(rows[1:], start=2):
        try:
            wl.append(float(row[iw]))
            n.append(float(row[i_n]))
            k.append(float(row[ik]) if ik is not None else 0.0)
        except (ValueError, IndexError):
            raise FilmcalcError(
                f"Material file {shown}, data row {lineno}: expected numbers for "
                f"wavelength_nm, n{', k' if ik is not None else ''}, got {brief_repr(row)}."
            ) from None
    return TabulatedIndex(wl, n, k, name=name, source=f"user table {path.name}", spec=str(path))


def spec_from_text(text):
    """A short typed material → a stack-file material value.

    ``"silicon"`` → ``"silicon"``; ``"n=1.47"`` or ``"n=2.5, k=3.4"`` →
    ``{n = …, k = …}``; ``"cauchy=1.62, 0.0135"`` → ``{cauchy = [...]}``.
    """
    t = str(text).strip()
    low = t.lower().replace(" ", "")
    try:
        if low.startswith("cauchy="):
            return {"cauchy": [float(v) for v in low[7:].split(",") if v]}
        if low.startswith("n="):
            parts = dict(p.split("=", 1) for p in low.split(","))
            if set(parts) - {"n", "k"}:
                raise ValueError
            return {key: float(v) for key, v in parts.items()}
    except ValueError:
        raise FilmcalcError(f"Material {text!r} not understood: write a built-in name, n=1.47, n=2.5,k=3.4 "
                            "or cauchy=A,B,C.") from None
    return t


def material_from_spec(spec, base_dir=None):
    """Turn a stack file's material value into a :class:`Material`.

    Parameters
    ----------
    spec : str or dict or Material
        A built-in name (``"silicon"``), a CSV path (``"my_oxide.csv"``), or an
        inline table: ``{n = 1.47, k = 0}``, ``{cauchy = [A, B, C], k = 0}``,
        ``{sellmeier_b = [...], sellmeier_c = [...]}`` (C in µm²), or a
        built-in with parameters ``{name = "water", temperature_c = 25}``.
    base_dir : path-like, optional
        Folder that relative CSV paths are resolved against (the stack file's); a CSV path must
        lie in it or below it, and without it a CSV path is refused.

    Returns
    -------
    Material
    """
    if isinstance(spec, Material):
        return spec
    if isinstance(spec, str):
        if spec.lower().endswith((".csv", ".tsv", ".txt")):
            mat = load_material_csv(table_path(spec, base_dir, "Material"))
            mat.spec = spec
            return mat
        return built_in_material(spec)
    if isinstance(spec, dict):
        spec = dict(spec)
        keys = set(spec)
        try:
            if "name" in keys:
                name = spec.pop("name")
                mat = built_in_material(name, **spec)
                mat.spec = {"name": name, **spec}
                return mat
            if "n" in keys and keys <= {"n", "k"}:
                return ConstantIndex(spec["n"], spec.get("k", 0.0), spec=dict(spec))
            if "cauchy" in keys and keys <= {"cauchy", "k"}:
                coeffs = list(spec["cauchy"])
                if not 1 <= len(coeffs) <= 3:
                    raise FilmcalcError("cauchy takes one to three coefficients [A, B (µm²), C (µm⁴)].")
                return CauchyIndex(*coeffs, k=spec.get("k", 0.0), spec=dict(spec))
            if keys == {"sellmeier_b", "sellmeier_c"}:
                return SellmeierIndex(spec["sellmeier_b"], spec["sellmeier_c"], spec=dict(spec))
        except (TypeError, ValueError, OverflowError) as exc:  # OverflowError: an integer too large for a float
            if isinstance(exc, FilmcalcError):
                raise
            raise FilmcalcError(f"Material {brief_repr(spec)}: the values must be numbers "
                                f"({str(exc)[:80]}).") from None
        raise FilmcalcError(
            f"Material table {brief_repr(spec)} is not understood. Use {{n = 1.47, k = 0}}, "
            "{cauchy = [A, B, C]}, {sellmeier_b = [...], sellmeier_c = [...]} or "
            "{name = \"water\", temperature_c = 25}."
        )
    raise FilmcalcError(f"A material must be a name, a CSV path or a table, not {type(spec).__name__}.")
