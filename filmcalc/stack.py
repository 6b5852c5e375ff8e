"""Film stacks and the TOML stack file.

Public names
------------
Layer, Light, Stack
    What is measured: ambient, ordered layers, substrate, which layer is the
    unknown film, and how it is lit.
load_stack, loads_stack
    Read a stack file (path or text), with errors that name the key.
save_stack, dumps_stack
    Write a stack back; ``loads_stack(dumps_stack(s))`` gives the same stack.

The stack file::

    name = "thermal oxide on silicon"
    [ambient]
    material = "air"
    [[layers]]
    material = "fused-silica"   # built-in name, CSV path, or {n = 1.47, k = 0}
    thickness_nm = 120
    unknown = true              # the film whose thickness is measured
    # coherent = false          # a thick layer (slide, disc): added in intensity
    [substrate]
    material = "silicon"
    [light]
    source = "D65"              # illuminant name, "line:632.8", or a CSV path
    angle_deg = 0
    polarisation = "unpolarised"   # or "s", "p"
    numerical_aperture = 0.0

This module holds data only; the optics module computes with it.
"""

from __future__ import annotations

import dataclasses
import difflib
import math
import tomllib
from pathlib import Path

import tomli_w

from .errors import FilmcalcError
from .materials import Material, brief_repr, material_from_spec, table_path

__all__ = ["Layer", "Light", "Stack", "load_stack", "loads_stack", "save_stack", "dumps_stack", "stack_from_dict",
           "stack_to_dict",
           "POLARISATIONS"]

POLARISATIONS = ("unpolarised", "s", "p")


@dataclasses.dataclass
class Layer:
    """One layer of a stack.

    Attributes
    ----------
    material : Material
    thickness_nm : float
        Physical thickness, nm.
    coherent : bool
        False for a thick layer (≫ the light's coherence length, e.g. a 1 mm
        slide) whose reflections add in intensity.
    unknown : bool
        True for the film whose thickness is measured (at most one per stack).
    """

    material: Material
    thickness_nm: float
    coherent: bool = True
    unknown: bool = False


@dataclasses.dataclass
class Light:
    """How the stack is lit.

    Attributes
    ----------
    source : str
        Illuminant name (``"D65"``, ``"F2"``), ``"line:632.8"`` or a CSV path;
        interpreted by the colour module.
    angle_deg : float
        Angle of incidence in the ambient, degrees (0 ≤ θ < 90).
    polarisation : {"unpolarised", "s", "p"}
    numerical_aperture : float
        NA of the illuminating objective (0 = collimated).
    """

    source: str = "D65"
    angle_deg: float = 0.0
    polarisation: str = "unpolarised"
    numerical_aperture: float = 0.0


@dataclasses.dataclass
class Stack:
    """Ambient / layers / substrate, with the light.

    Layers are ordered from the ambient (where the light comes from) down
    to the substrate.
    """

    name: str
    ambient: Material
    layers: list[Layer]
    substrate: Material
    light: Light = dataclasses.field(default_factory=Light)
    base_dir: Path | None = None  # folder that relative paths in the file (CSV tables, lights) resolve against

    @property
    def film_index(self):
        """Position in ``layers`` of the unknown film, or None."""
        hits = [i for i, layer in enumerate(self.layers) if layer.unknown]
        return hits[0] if hits else None

    @property
    def film(self):
        """The unknown film layer (raises if the stack has none)."""
        i = self.film_index
        if i is None:
            raise FilmcalcError(f"Stack {self.name!r} marks no layer as unknown = true.")
        return self.layers[i]

    def media(self):
        """All materials from ambient to substrate."""
        return [self.ambient] + [layer.material for layer in self.layers] + [self.substrate]

    def with_film_thickness(self, thickness_nm):
        """A copy with the unknown film set to ``thickness_nm``."""
        i = self.film_index
        if i is None:
            raise FilmcalcError(f"Stack {self.name!r} marks no layer as unknown = true.")
        layers = list(self.layers)
        layers[i] = dataclasses.replace(layers[i], thickness_nm=float(thickness_nm))
        return dataclasses.replace(self, layers=layers)

    def with_light(self, **changes):
        """A copy with some light settings changed (source, angle_deg, …)."""
        return dataclasses.replace(self, light=_validate_light(dataclasses.replace(self.light, **changes)))


_TOP_KEYS = {"name", "ambient", "layers", "substrate", "light"}
_MEDIUM_KEYS = {"material"}
_LAYER_KEYS = {"material", "thickness_nm", "coherent", "unknown"}
_LIGHT_KEYS = {"source", "angle_deg", "polarisation", "numerical_aperture"}


def _unknown_keys(table, allowed, where):
    extra = set(table) - allowed
    if extra:
        key = sorted(extra)[0]
        close = difflib.get_close_matches(key, list(allowed), n=1)
        hint = f" Did you mean {close[0]!r}?" if close else ""
        raise FilmcalcError(f"Unknown key {brief_repr(key)} in {where}.{hint} "
                            f"Allowed keys: {', '.join(sorted(allowed))}.")


def _float(value):
    """float(value), with integers too large for a float (TOML allows any length) made ±inf."""
    try:
        return float(value)
    except OverflowError:
        return math.inf if value > 0 else -math.inf


def _number(value, where, minimum=None, below=None):
    if isinstance(value, bool) or not isinstance(value, (int, float)):
        raise FilmcalcError(f"{where} must be a number (got {brief_repr(value)}).")
    value = _float(value)
    if not math.isfinite(value) or (minimum is not None and value < minimum) or (below is not None
                                                                                   and value >= below):
        rng = (f" ≥ {minimum:g}" if minimum is not None else "") + (f" and < {below:g}" if below is not None else "")
        raise FilmcalcError(f"{where} must be a number{rng} (got {value!r}).")
    return value


def _material(value, where, base_dir):
    if value is None:
        raise FilmcalcError(f"{where} is missing: give a built-in name, a CSV path or {{n = …, k = …}}.")
    try:
        return material_from_spec(value, base_dir)
    except FilmcalcError as exc:
        raise FilmcalcError(f"{where}: {exc}") from None


def _validate_light(light):
    if not isinstance(light.source, str) or not light.source.strip():
        raise FilmcalcError("light.source must be an illuminant name, 'line:632.8' or a CSV path.")
    _number(light.angle_deg, "light.angle_deg", 0, 90)
    if light.polarisation not in POLARISATIONS:
        raise FilmcalcError(f"light.polarisation must be one of {', '.join(POLARISATIONS)} "
                            f"(got {brief_repr(light.polarisation)}).")
    _number(light.numerical_aperture, "light.numerical_aperture", 0, 1.7)
    return light


def stack_from_dict(data, base_dir=None):
    """Build a :class:`Stack` from the parsed TOML tables (see module docstring)."""
    if not isinstance(data, dict):
        raise FilmcalcError("A stack must be a TOML table.")
    _unknown_keys(data, _TOP_KEYS, "the stack file")
    name = data.get("name", "unnamed stack")
    if not isinstance(name, str):
        raise FilmcalcError(f"name must be text (got {brief_repr(name)}).")
    for key in ("ambient", "substrate"):
        if not isinstance(data.get(key), dict):
            raise FilmcalcError(f"[{key}] is missing: add a [{key}] table with material = \"…\".")
        _unknown_keys(data[key], _MEDIUM_KEYS, f"[{key}]")
    ambient = _material(data["ambient"].get("material"), "ambient.material", base_dir)
    substrate = _material(data["substrate"].get("material"), "substrate.material", base_dir)
    raw_layers = data.get("layers", [])
    if not isinstance(raw_layers, list):
        raise FilmcalcError("layers must be written as [[layers]] tables.")
    layers = []
    for i, raw in enumerate(raw_layers, start=1):
        where = f"[[layers]] #{i}"
        if not isinstance(raw, dict):
            raise FilmcalcError(f"{where} must be a table.")
        _unknown_keys(raw, _LAYER_KEYS, where)
        if "thickness_nm" not in raw:
            raise FilmcalcError(f"{where}: thickness_nm is missing (the layer's thickness in nm).")
        flags = {}
        for flag, default in (("coherent", True), ("unknown", False)):
            value = raw.get(flag, default)
            if not isinstance(value, bool):
                raise FilmcalcError(f"{where}: {flag} must be true or false (got {brief_repr(value)}).")
            flags[flag] = value
        layers.append(Layer(_material(raw.get("material"), f"{where} material", base_dir),
                            _number(raw["thickness_nm"], f"{where} thickness_nm", 0), **flags))
    if sum(layer.unknown for layer in layers) > 1:
        raise FilmcalcError("Only one layer may have unknown = true.")
    film = next((layer for layer in layers if layer.unknown), None)
    if film is not None and not film.coherent:
        raise FilmcalcError("The unknown film must be a thin (coherent) layer: remove coherent = false.")
    raw_light = data.get("light", {})
    if not isinstance(raw_light, dict):
        raise FilmcalcError("[light] must be a table.")
    _unknown_keys(raw_light, _LIGHT_KEYS, "[light]")
    light = Light(**{k: (_float(v) if k in ("angle_deg", "numerical_aperture") and isinstance(v, int)
                         and not isinstance(v, bool) else v) for k, v in raw_light.items()})
    _validate_light(light)
    if light.source.lower().endswith(".csv"):  # read later by the colour module, from the same place
        table_path(light.source, base_dir, "light.source")
    return Stack(name, ambient, layers, substrate, light,
                 None if base_dir is None else Path(base_dir))


def loads_stack(text, base_dir=None):
    """Parse stack-file text.

    Raises
    ------
    FilmcalcError
        Bad TOML (with its line and column) or a bad key or value (named).
    """
    text = text.removeprefix("\ufeff")  # a byte-order mark some editors write
    try:
        data = tomllib.loads(text)
    except tomllib.TOMLDecodeError as exc:
        raise FilmcalcError(f"The stack file is not valid TOML: {exc}.") from None
    except RecursionError:
        raise FilmcalcError("The stack file is not valid TOML for filmcalc: it nests arrays or tables too deeply. "
                            "Write each layer as its own [[layers]] table.") from None
    return stack_from_dict(data, base_dir)


def load_stack(path):
    """Read a stack file; relative material CSV paths resolve against its folder."""
    path = Path(path)
    try:
        data = path.read_bytes()
    except (OSError, ValueError) as exc:  # ValueError: a NUL character in the path
        raise FilmcalcError(f"Cannot read stack file {brief_repr(str(path), 80)}: "
                            f"{getattr(exc, 'strerror', None) or exc}.") from None
    try:
        text = data.decode("utf-8")
    except UnicodeDecodeError as exc:
        raise FilmcalcError(f"{brief_repr(path.name)} is not UTF-8 text (byte {exc.start + 1} is not UTF-8), as a "
                            "stack file must be: save it again as UTF-8.") from None
    try:
        stack = loads_stack(text, base_dir=path.parent)
    except FilmcalcError as exc:
        raise FilmcalcError(f"{path.name}: {exc}") from None
    return stack


def stack_to_dict(stack):
    """The TOML tables for a stack (the inverse of :func:`stack_from_dict`)."""
    layers = []
    for layer in stack.layers:
        entry = {"material": layer.material.spec, "thickness_nm": float(layer.thickness_nm)}
        if not layer.coherent:
            entry["coherent"] = False
        if layer.unknown:
            entry["unknown"] = True
        layers.append(entry)
    light = dataclasses.asdict(stack.light)
    return {"name": stack.name, "ambient": {"material": stack.ambient.spec}, "layers": layers,
            "substrate": {"material": stack.substrate.spec}, "light": light}


def dumps_stack(stack):
    """Stack-file text for a stack."""
    return tomli_w.dumps(stack_to_dict(stack))


def save_stack(stack, path):
    """Write a stack file."""
    Path(path).write_text(dumps_stack(stack), encoding="utf-8")
