"""The model: which meshes, their length unit, the background permittivity, the potentials.

A model comes from command-line flags or from a TOML model file such as

    length_unit = "mm"                  # m, cm, mm, um, in, mil
    relative_permittivity = 1.0         # uniform background medium
    loss_tangent = 0.0                  # optional: the background's loss tangent
    frequency_Hz = 1e6                  # where the conductance G holds (lossy media only)
    meshes = ["sensor_head.msh"]        # paths relative to this file
    ground_plane_z = 0.0                # optional: infinite grounded plane z = const (length_unit)
    floating = ["lid"]                  # optional: conductors with zero net charge
    reference = "gnd_pour"              # optional: the conductor taken as the ground node
    [[dielectric]]                      # optional, repeatable: a closed body of one material
    mesh = "cover.stl"
    relative_permittivity = 3.8
    loss_tangent = 0.01                 # optional
    [volts]                             # conductors not listed are at 0 V
    drive = 5.0
    [output]
    folder = "sensor_out"               # relative to this file
    spice_name = "sensor_head"
"""

import math
from dataclasses import dataclass, field
from pathlib import Path

try:
    import tomllib
except ModuleNotFoundError:          # Python 3.10
    import tomli as tomllib

from bem3d.base.constants import LENGTH_UNITS
from bem3d.base.errors import ModelError, option
from bem3d.base.files import read_regular

#: Accepted relative permittivities: no passive medium has a static value below vacuum's 1, and
#: the largest reported for bulk ceramics are of order 1e5 (common practice, no source).
PERMITTIVITY_RANGE = (1.0, 1e6)

#: Where the conductance is given when a medium is lossy and no frequency is: 1 MHz, the
#: order at which capacitive touch and proximity sensors are driven (common practice, no source).
DEFAULT_FREQUENCY = 1e6

_TOP_KEYS = {"length_unit", "relative_permittivity", "meshes", "volts", "output",
             "ground_plane_z", "floating", "dielectric", "loss_tangent", "frequency_Hz",
             "reference"}
_BODY_KEYS = {"mesh", "relative_permittivity", "loss_tangent"}
_OUTPUT_KEYS = {"folder", "spice_name"}
#: A model file lists a few meshes and settings; anything near this size is not one.
MAX_MODEL_BYTES = 1 << 20


@dataclass
class Model:
    """Everything needed to run one extraction. Potentials in V; lengths in `length_unit`."""

    meshes: list
    length_unit: str = "m"
    relative_permittivity: float = 1.0
    volts: dict = field(default_factory=dict)
    output_folder: Path | None = None
    spice_name: str = "bem3d_capacitance"
    source: str = "command line"
    ground_plane_z: float | None = None
    floating: list = field(default_factory=list)
    dielectrics: list = field(default_factory=list)  # [(mesh path, eps_r, loss tangent)]
    loss_tangent: float = 0.0
    frequency_Hz: float | None = None
    reference: str | None = None

    def __post_init__(self):
        self.meshes = [Path(p) for p in self.meshes]
        if not self.meshes:
            raise ModelError(f"{self.source}: no mesh files given")
        if self.length_unit not in LENGTH_UNITS:
            raise ModelError(f"{self.source}: unknown length unit '{self.length_unit}' "
                             f"(use one of {', '.join(LENGTH_UNITS)})")
        self.relative_permittivity = _permittivity(self.relative_permittivity,
                                                   "relative permittivity", self.source)
        self.volts = {str(k): _number(v, f"potential of '{k}'", self.source)
                      for k, v in self.volts.items()}
        if self.ground_plane_z is not None:
            self.ground_plane_z = _number(self.ground_plane_z, "ground plane z", self.source)
        if not isinstance(self.floating, (list, tuple)) or not all(
                isinstance(f, str) for f in self.floating):
            raise ModelError(f"{self.source}: 'floating' must be a list of conductor names")
        self.floating = list(dict.fromkeys(self.floating))
        if self.reference is not None and (not isinstance(self.reference, str)
                                           or not self.reference):
            raise ModelError(f"{self.source}: 'reference' must be a conductor name")
        checked = []
        for path, eps, *loss in self.dielectrics:
            checked.append((Path(path), _permittivity(eps, f"relative permittivity of {path}",
                                                      self.source),
                            _loss_tangent(loss[0] if loss else 0.0, f"loss tangent of {path}",
                                          self.source)))
        self.dielectrics = checked
        self.loss_tangent = _loss_tangent(self.loss_tangent, "loss tangent", self.source)
        if self.frequency_Hz is not None:
            self.frequency_Hz = _number(self.frequency_Hz, "frequency (Hz)", self.source)
            if self.frequency_Hz <= 0:
                raise ModelError(f"{self.source}: frequency must be positive, got "
                                 f"{self.frequency_Hz:g} Hz")

    @property
    def lossy(self):
        """Does any medium have a loss tangent?"""
        return bool(self.loss_tangent) or any(loss for _, _, loss in self.dielectrics)

    @property
    def notes(self):
        """Settings taken by default that the user should hear of."""
        if self.lossy and self.frequency_Hz is None:
            return [f"a loss tangent is given without a frequency: the conductance is given at "
                    f"{DEFAULT_FREQUENCY:g} Hz"]
        return []

    @property
    def medium(self):
        """The background medium and the frequency (Hz) of the conductance, as keyword
        arguments of solve.conductors.solve_panels."""
        frequency = None
        if self.lossy:
            frequency = DEFAULT_FREQUENCY if self.frequency_Hz is None else self.frequency_Hz
        return {"eps_r": self.relative_permittivity, "loss_tangent": self.loss_tangent,
                "frequency": frequency}

    def files(self):
        """Every file the model reads: meshes, dielectric bodies, the model file."""
        files = [*self.meshes, *(path for path, _, _ in self.dielectrics)]
        return files + ([Path(self.source)] if Path(self.source).is_file() else [])

    @property
    def ground_z_m(self):
        """Height of the grounded plane in metres, or None."""
        if self.ground_plane_z is None:
            return None
        return self.ground_plane_z * LENGTH_UNITS[self.length_unit]


def _loss_tangent(value, what, source):
    number = _number(value, what, source)
    if not 0 <= number < 1:
        raise ModelError(f"{source}: {what} must be at least 0 and below 1, got {number:g}")
    return number


def _number(value, what, source):
    if isinstance(value, bool) or not isinstance(value, (int, float)):
        raise ModelError(f"{source}: {what} must be a number, got {value!r}")
    try:
        number = float(value)
    except OverflowError:                  # an integer beyond the float range
        raise ModelError(f"{source}: {what} is too large ({len(str(value))} digits)") from None
    if not math.isfinite(number):
        raise ModelError(f"{source}: {what} must be finite, got {value!r}")
    return number


def _permittivity(value, what, source):
    eps = _number(value, what, source)
    low, high = PERMITTIVITY_RANGE
    if not low <= eps <= high:
        raise ModelError(f"{source}: {what} must lie between {low:g} and {high:g}, got {eps:g}")
    return eps


def load_model(path):
    """Read a TOML model file; relative paths in it are taken from the file's folder."""
    path = Path(path)
    try:
        data = tomllib.loads(read_regular(path, MAX_MODEL_BYTES, "model file").decode("utf-8"))
    except UnicodeDecodeError as err:
        raise ModelError(f"{path}: cannot read model file ({err})") from None
    except tomllib.TOMLDecodeError as err:
        raise ModelError(f"{path}: malformed TOML ({err})") from None
    except RecursionError:               # the parser recurses once per nested array or table
        raise ModelError(f"{path}: malformed TOML (arrays or tables nested too deeply)") from None
    unknown = set(data) - _TOP_KEYS
    if unknown:
        raise ModelError(f"{path}: unknown key(s) {', '.join(sorted(unknown))} "
                         f"(known: {', '.join(sorted(_TOP_KEYS))})")
    meshes = data.get("meshes")
    if not isinstance(meshes, list) or not all(isinstance(m, str) for m in meshes):
        raise ModelError(f"{path}: 'meshes' must be a list of file names")
    volts = data.get("volts", {})
    output = data.get("output", {})
    for key, value, kind in [("volts", volts, dict), ("output", output, dict)]:
        if not isinstance(value, kind):
            raise ModelError(f"{path}: [{key}] must be a table")
    unknown = set(output) - _OUTPUT_KEYS
    if unknown:
        raise ModelError(f"{path}: unknown key(s) in [output]: {', '.join(sorted(unknown))}")
    unit = data.get("length_unit", "m")
    if not isinstance(unit, str):
        raise ModelError(f"{path}: 'length_unit' must be a string")
    folder = output.get("folder")
    spice_name = output.get("spice_name", "bem3d_capacitance")
    if folder is not None and not isinstance(folder, str) or not isinstance(spice_name, str):
        raise ModelError(f"{path}: [output] folder and spice_name must be strings")
    here = path.parent
    bodies = data.get("dielectric", [])
    if not isinstance(bodies, list) or not all(
            isinstance(b, dict) and {"mesh", "relative_permittivity"} <= set(b) <= _BODY_KEYS
            and isinstance(b["mesh"], str) for b in bodies):
        raise ModelError(f"{path}: each [[dielectric]] needs 'mesh' (a file name) and "
                         "'relative_permittivity', and may have 'loss_tangent'")
    return Model(meshes=[here / m for m in meshes], length_unit=unit,
                 relative_permittivity=data.get("relative_permittivity", 1.0), volts=volts,
                 output_folder=None if folder is None else here / folder,
                 spice_name=spice_name, source=str(path),
                 ground_plane_z=data.get("ground_plane_z"), floating=data.get("floating", []),
                 dielectrics=[(here / b["mesh"], b["relative_permittivity"],
                               b.get("loss_tangent", 0.0)) for b in bodies],
                 loss_tangent=data.get("loss_tangent", 0.0),
                 frequency_Hz=data.get("frequency_Hz"), reference=data.get("reference"))


def parse_dielectrics(items):
    """[(Path('cover.stl'), 3.8, 0.0), (Path('board.stl'), 4.4, 0.02)] from
    ['cover.stl=3.8', 'board.stl=4.4,0.02', ...]."""
    bodies = []
    for item in items or []:
        name, sep, value = item.rpartition("=")
        numbers = value.split(",")
        try:
            bodies.append((Path(name), float(numbers[0]),
                           float(numbers[1]) if len(numbers) == 2 else 0.0))
        except ValueError:
            sep = ""
        if not sep or not name or len(numbers) > 2:
            raise ModelError(f"{option('dielectrics')}: expected FILE=EPS_R or "
                             f"FILE=EPS_R,LOSS_TANGENT, got '{item}'")
    return bodies


def parse_volts(items, source=option("volts")):
    """{'drive': 5.0} from ['drive=5', ...]."""
    volts = {}
    for item in items or []:
        name, sep, value = item.partition("=")
        try:
            volts[name.strip()] = float(value)
        except ValueError:
            sep = ""
        if not sep or not name.strip():
            raise ModelError(f"{source}: expected NAME=VOLTS, got '{item}'")
    return volts


def build_model(inputs, *, units=None, volts=None, eps_r=None, ground_plane=None, floating=(),
                dielectrics=(), loss_tangent=None, frequency=None, reference=None, out=None):
    """The Model of `inputs` (mesh paths, or one .toml model file whose settings are the
    defaults) with the given settings on top; None (or empty) leaves a setting as it is.

    units: mesh length unit; volts: {name: V}; eps_r: background relative permittivity;
    ground_plane: z of a grounded plane (mesh unit); floating: conductor names; dielectrics:
    [(mesh path, eps_r[, loss tangent])] or {path: eps_r or (eps_r, loss tangent)};
    loss_tangent: the background's; frequency: Hz at which the conductance is given (lossy
    media); reference: the conductor taken as the ground node (the far field lumped into it);
    out: output folder (default <first input>_result)."""
    inputs = [inputs] if isinstance(inputs, (str, Path)) else list(inputs)
    if not inputs:
        raise ModelError("no mesh files given")
    if len(inputs) == 1 and str(inputs[0]).lower().endswith(".toml"):
        model = load_model(inputs[0])
    else:
        model = Model(meshes=inputs, length_unit=units or "m")
    if units:
        model.length_unit = units
    if eps_r is not None:
        model.relative_permittivity = eps_r
    model.volts.update(volts or {})
    if ground_plane is not None:
        model.ground_plane_z = ground_plane
    model.floating += list(floating or ())
    if isinstance(dielectrics, dict):
        dielectrics = [(path, *(value if isinstance(value, (tuple, list)) else (value,)))
                       for path, value in dielectrics.items()]
    model.dielectrics += [(Path(path), *material) for path, *material in dielectrics or ()]
    if loss_tangent is not None:
        model.loss_tangent = loss_tangent
    if frequency is not None:
        model.frequency_Hz = frequency
    if reference is not None:
        model.reference = reference
    if out is not None:
        model.output_folder = Path(out)
    if model.output_folder is None:
        model.output_folder = Path(f"{Path(inputs[0]).stem}_result")
    model.__post_init__()                  # validate the merged settings
    return model
