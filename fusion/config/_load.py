"""Reading a config: TOML with the standard library, validated into a :class:`Config`."""

from __future__ import annotations

import dataclasses
import hashlib
import re
import tomllib
from dataclasses import dataclass
from pathlib import Path

import numpy as np

from ..errors import ConfigError
from ..mechanics import (
    IsotropicMaterial, Laminate, LayupError, MaterialError, OrthotropicMaterial, Ply,
    SurfaceLayer, parse_layup,
)
from ..register import check_handedness, fit_transform
from . import _schema
from ._schema import Context
from ._sections import (CampaignSpec, ComputeSpec, DiagnosisSpec, IsotropicSpec, LaminateSpec, LayerRef,
                        OrthotropicSpec, OutputSpec, PlanSpec, RegistrationSpec, RunSpec, TopLevel, run_key)

_MAX_CONFIG_BYTES = 4 << 20


# --------------------------------------------------------------------------- the config
@dataclass(frozen=True)
class Config:
    """A validated campaign config (all quantities SI, paths resolved)."""

    path: Path | None
    text: str
    campaign: CampaignSpec
    materials: dict
    laminates: dict
    runs: tuple
    registration: RegistrationSpec | None
    diagnosis: DiagnosisSpec
    compute: ComputeSpec
    output: OutputSpec
    plan: PlanSpec
    material_sources: dict = dataclasses.field(default_factory=dict)

    def __repr__(self) -> str:
        # the whole text and every table would fill a screen: name what the config holds
        return (f"Config(path={str(self.path)!r}, runs={[r.name for r in self.runs]!r}, "
                f"laminates={sorted(self.laminates)!r}, materials={sorted(self.materials)!r}, "
                f"sha256={self.sha256[:12]!r}...)")

    @property
    def sha256(self) -> str:
        """SHA-256 of the config text (provenance)."""
        return hashlib.sha256(self.text.encode("utf-8")).hexdigest()

    @property
    def folder(self) -> Path:
        return self.path.parent if self.path is not None else Path(".")

    def laminate_for(self, run: RunSpec) -> Laminate:
        """The laminate of ``run`` (its ``laminate`` key, or the default one)."""
        return self.laminates[run.laminate or "default"]

    def registration_for(self, run: RunSpec) -> RegistrationSpec | None:
        return run.registration or self.registration

    def lateral_heat_for(self, run: RunSpec) -> str:
        """'off', 'beside' or 'instead': the run's ``lateral_heat``, else ``diagnosis.lateral_heat``."""
        return run.lateral_heat or self.diagnosis.lateral_heat

    def output_folder(self, override=None) -> Path:
        if override is not None:
            return Path(override)
        return self.output.folder if self.output.folder is not None else self.folder / "results"


def _read_toml(path: Path, key_name: str, ctx: Context | None) -> tuple[dict, str]:
    where = ctx.source if ctx else None
    try:
        if path.is_dir():
            raise ConfigError(key_name, f"{str(path)!r} is a folder, expected a TOML file", source=where)
        if path.exists() and not path.is_file():
            raise ConfigError(key_name, f"{str(path)!r} is not a regular file (a pipe or device?), "
                              "expected a TOML file", source=where)
        size = path.stat().st_size
        if size > _MAX_CONFIG_BYTES:
            raise ConfigError(key_name, f"{str(path)!r} is {size} bytes; a config is at most "
                              f"{_MAX_CONFIG_BYTES} bytes", source=where)
        with open(path, "rb") as fh:
            raw = fh.read(_MAX_CONFIG_BYTES + 1)   # a file that grew since: still bounded
        if len(raw) > _MAX_CONFIG_BYTES:
            raise ConfigError(key_name, f"{str(path)!r} is more than {_MAX_CONFIG_BYTES} bytes; a config "
                              f"is at most {_MAX_CONFIG_BYTES} bytes", source=where)
    except FileNotFoundError as e:
        raise ConfigError(key_name, f"file {str(path)!r} does not exist", source=where) from e
    except PermissionError as e:
        raise ConfigError(key_name, f"file {str(path)!r} cannot be read (permission denied)", source=where) from e
    try:
        text = raw.decode("utf-8-sig")          # editors on Windows may write a byte-order mark
    except UnicodeDecodeError as e:
        raise ConfigError(key_name, f"{str(path)!r} is not UTF-8 text (byte {e.start})", source=where) from e
    return _parse_toml(text, key_name, where, f"{str(path)!r} is")


def _parse_toml(text, key_name, where, what):
    try:
        return tomllib.loads(text), text
    except tomllib.TOMLDecodeError as e:
        raise ConfigError(key_name, f"{what} not valid TOML: {e}", source=where) from e
    except RecursionError as e:
        raise ConfigError(key_name, f"{what} nested too deeply to be a config", source=where) from e


def load_config(path) -> Config:
    """Read and validate a config file.

    Raises
    ------
    ConfigError
        Naming the key path and what was expected.
    """
    path = Path(path)
    doc, text = _read_toml(path, "config", None)
    return _validate(doc, text, path)


def loads_config(text: str, *, base=".") -> Config:
    """Validate config ``text`` (relative paths resolve from ``base``)."""
    if not isinstance(text, str):
        raise ConfigError("config", f"expected TOML text, got {type(text).__name__}")
    doc, _ = _parse_toml(text, "config", None, "the text is")
    return _validate(doc, text, None, base=Path(base))


def _validate(doc: dict, text: str, path: Path | None, *, base: Path | None = None) -> Config:
    ctx = Context(source=str(path) if path else None, base=(path.parent if path else base or Path(".")))
    top = _schema.build(TopLevel, doc, "", ctx)

    raw_materials: dict = {}
    library = top.material_library
    if isinstance(library, Path):
        library = (library,)
    for i, lib in enumerate(library or ()):
        lib_doc, _ = _read_toml(lib, f"material_library[{i}]" if len(library) > 1 else "material_library", ctx)
        extra = set(lib_doc) - {"materials"}
        if extra:
            raise ConfigError(f"material_library ({lib.name})", f"expected only [materials.NAME] tables, "
                              f"found {sorted(extra)}", source=ctx.source)
        raw_materials.update(_table(lib_doc.get("materials", {}), "materials", ctx))
    raw_materials.update(_table(top.materials, "materials", ctx))
    materials, material_sources = {}, {}
    for name, table in raw_materials.items():
        materials[name], material_sources[name] = _material(name, table, ctx)

    laminate_specs = {}
    if top.laminate is not None:
        laminate_specs["default"] = ("laminate", top.laminate)
    for name, table in _table(top.laminates, "laminates", ctx).items():
        if not re.fullmatch(r"[A-Za-z0-9_.\-]{1,60}", name):
            raise ConfigError(f"laminates.{name}", "laminate names use letters, digits, - _ . only",
                              source=ctx.source)
        laminate_specs[name] = (f"laminates.{name}", _schema.build(LaminateSpec, table, f"laminates.{name}", ctx))
    laminates = {name: _laminate(name, spec, k, materials, ctx) for name, (k, spec) in laminate_specs.items()}

    if not isinstance(top.run, (list, tuple)):
        raise ConfigError("run", "expected an array of tables [[run]]", source=ctx.source)
    runs, seen = [], {}
    for i, table in enumerate(top.run):
        # messages name the run as the user wrote it, not by its place in the file
        where = run_key(table.get("name") if isinstance(table, dict) else None, i)
        run = _schema.build(RunSpec, table, where, ctx)
        low = run.name.lower()
        if low in seen:
            raise ConfigError(f"{where}.name", f"{run.name!r} is used by run {seen[low]!r} already "
                              "(names become folder names and must be unique, ignoring case)",
                              source=ctx.source)
        seen[low] = run.name
        want = run.laminate or "default"
        if want not in laminates:
            if run.laminate is None:
                raise ConfigError(f"{where}.laminate", "no laminate given and the config has no "
                                  "[laminate] table", source=ctx.source)
            raise ConfigError(f"{where}.laminate", f"unknown laminate {run.laminate!r}; known: "
                              f"{sorted(k for k in laminates if k != 'default')}", source=ctx.source)
        if run.registration is None and top.registration is None:
            raise ConfigError(f"{where}.registration", "no [registration] for this run and none at "
                              "the top level (use method = \"identity\" if the correlation data are "
                              "already on the IR pixel grid)", source=ctx.source)
        _check_registration(run, i, top.registration, ctx)
        runs.append(run)

    diagnosis = top.diagnosis or DiagnosisSpec()
    for i, run in enumerate(runs):
        _check_lateral(run, i, diagnosis, run.registration or top.registration, ctx)
    region_names = [r.name for r in diagnosis.regions]
    if len(set(region_names)) != len(region_names):
        raise ConfigError("diagnosis.regions", "region names must be unique", source=ctx.source)
    if diagnosis.calibration is not None and diagnosis.calibration.region not in region_names:
        raise ConfigError("diagnosis.calibration.region", f"unknown region "
                          f"{diagnosis.calibration.region!r}; regions: {region_names}", source=ctx.source)
    plan = top.plan or PlanSpec()
    if plan.f_min >= plan.f_max:
        raise ConfigError("plan.f_max", f"expected f_max > f_min ({plan.f_min} Hz)", source=ctx.source)
    if plan.laminate is not None and plan.laminate not in laminates:
        raise ConfigError("plan.laminate", f"unknown laminate {plan.laminate!r}", source=ctx.source)

    return Config(path=path, text=text, campaign=top.campaign or CampaignSpec(), materials=materials,
                  laminates=laminates, runs=tuple(runs), registration=top.registration,
                  diagnosis=diagnosis, compute=top.compute or ComputeSpec(),
                  output=top.output or OutputSpec(), plan=plan, material_sources=material_sources)


def _check_registration(run, i, top_registration, ctx):
    """The registration of a run against the coordinates of its correlation data."""
    reg = run.registration or top_registration
    where = run_key(run.name, i)
    rk = f"{where}.registration" if run.registration is not None else "registration"
    d = run.dic
    images = d.images is not None
    if reg.method == "identity" and not images:
        if d.coordinates != "px":
            raise ConfigError(f"{where}.dic.coordinates", f"method 'identity' takes the file's x, y as IR "
                              f"pixels [col, row], but the file is in {d.coordinates!r}; set coordinates = "
                              "\"px\" if it is on the IR pixel grid, else register it with control points "
                              "(method 'similarity', 'affine' or 'homography')", source=ctx.source)
        if d.effective_y_axis == "up" and not reg.ir_mirrored:
            raise ConfigError(f"{where}.dic.y_axis", "method 'identity' takes the file's y as the IR row, "
                              "which counts down, but y_axis = \"up\": that would mirror the field; set "
                              "y_axis = \"down\" if y counts image rows (or ir_mirrored = true if the IR "
                              "image really is mirrored)", source=ctx.source)
    if reg.method == "camera" and images:
        raise ConfigError(f"{rk}.method", "method 'camera' needs 3D correlation points (x, y, z); images "
                          "correlated here give 2D fields: use 'homography'", source=ctx.source)
    if reg.dic_points_units is not None:
        if images and reg.dic_points_units == "mm" and d.pixel_size is None:
            raise ConfigError(f"{rk}.dic_points_units", "'mm' on images means [col, row] times "
                              "dic.pixel_size, which is not given; give pixel_size or the points in "
                              "px", source=ctx.source)
        if not images and reg.dic_points_units != d.coordinates:
            raise ConfigError(f"{rk}.dic_points_units", f"is {reg.dic_points_units!r} but the correlation "
                              f"file of run {run.name!r} is in {d.coordinates!r} (dic.coordinates); control "
                              "points are written in the file's own coordinates", source=ctx.source)
    if reg.method in ("similarity", "affine", "homography") and reg.dic_points is not None:
        _check_points(reg, rk, d, ctx)


def _check_points(reg, rk, dic, ctx):
    """Control points that a plane transform cannot fit, or that mirror the field, are refused
    here, before any data is read (the run checks again on its data)."""
    pts = np.asarray([p[:2] for p in reg.dic_points], float)
    if any(len(p) != 2 for p in reg.dic_points):
        raise ConfigError(f"{rk}.dic_points", f"method {reg.method!r} needs [x, y] points; [x, y, z] "
                          "points are for method 'camera'", source=ctx.source)
    m = dic.to_specimen(reg.dic_points_units)
    src = pts * np.diag(m)[:2]
    try:
        t = fit_transform(src, np.asarray(reg.ir_points, float), method=reg.method,
                          ransac_threshold=reg.ransac_threshold, warn_limit=None)
    except ValueError as e:
        raise ConfigError(f"{rk}.dic_points", str(e), source=ctx.source) from e
    try:
        check_handedness(t.jacobian(src[t.inliers]), mirrored=reg.ir_mirrored, method=reg.method)
    except ValueError as e:
        raise ConfigError(f"{rk}.ir_points", str(e), source=ctx.source) from e


def _check_lateral(run, i, diagnosis, registration, ctx):
    """The lateral heat model needs the infrared pixel on the specimen: mm and a 2-D registration."""
    if (run.lateral_heat or diagnosis.lateral_heat) == "off":
        return
    rk = run_key(run.name, i)
    where = f"{rk}.lateral_heat" if run.lateral_heat else "diagnosis.lateral_heat"
    if registration.method == "camera":
        raise ConfigError(f"{rk}.registration.method", f"{where} needs a 2-D registration (homography, "
                          "affine, similarity, identity or fiducials) to know the infrared pixel on the "
                          "specimen, not 'camera'", source=ctx.source)
    d = run.dic
    in_mm = d.pixel_size is not None if d.images is not None else d.coordinates == "mm"
    if not in_mm:
        key = "dic.pixel_size" if d.images is not None else "dic.coordinates"
        raise ConfigError(f"{rk}.{key}", f"{where} needs the size of an infrared pixel on the specimen: "
                          "give the correlation coordinates in mm (dic.coordinates = \"mm\", or dic.pixel_size "
                          "for speckle images)", source=ctx.source)


def _table(value, k, ctx) -> dict:
    if not isinstance(value, dict) or not all(isinstance(v, dict) for v in value.values()):
        raise ConfigError(k, f"expected tables [{k}.NAME], got {value!r}", source=ctx.source)
    return value


def _material(name, table, ctx):
    k = f"materials.{name}"
    if not re.fullmatch(r"[A-Za-z0-9_.\-]{1,60}", name):
        raise ConfigError(k, "material names use letters, digits, - _ . only", source=ctx.source)
    if "E1" in table:
        spec_cls, cls = OrthotropicSpec, OrthotropicMaterial
    elif "E" in table:
        spec_cls, cls = IsotropicSpec, IsotropicMaterial
    else:
        raise ConfigError(k, "expected an orthotropic ply (E1 E2 G12 nu12 alpha1 alpha2 density "
                          "specific_heat k1 k2 k3) or an isotropic material (E nu alpha density "
                          "specific_heat k)", source=ctx.source)
    spec = _schema.build(spec_cls, table, k, ctx)
    values = {f.name: getattr(spec, f.name) for f in dataclasses.fields(spec) if f.name != "source"}
    try:
        return cls(name=name, **values), spec.source
    except MaterialError as e:
        raise ConfigError(f"{k}.{e.field}", str(e).split(": ", 1)[-1], source=ctx.source) from e


def _layer(ref: LayerRef | None, k, materials, ctx):
    if ref is None:
        return None
    mat = materials.get(ref.material)
    if mat is None:
        raise ConfigError(f"{k}.material", f"unknown material {ref.material!r}; known: {sorted(materials)}",
                          source=ctx.source)
    if not isinstance(mat, IsotropicMaterial):
        raise ConfigError(f"{k}.material", f"{ref.material!r} is orthotropic; a surface layer needs an "
                          "isotropic material (E, nu, alpha...)", source=ctx.source)
    try:
        return SurfaceLayer(material=mat, thickness=ref.thickness)
    except MaterialError as e:
        raise ConfigError(f"{k}.{e.field}", str(e).split(": ", 1)[-1], source=ctx.source) from e


def _laminate(name, spec: LaminateSpec, k, materials, ctx) -> Laminate:
    try:
        angles = parse_layup(spec.layup if isinstance(spec.layup, str) else list(spec.layup))
    except LayupError as e:
        raise ConfigError(f"{k}.layup", str(e), source=ctx.source) from e
    mat = materials.get(spec.ply_material)
    if mat is None:
        raise ConfigError(f"{k}.ply_material", f"unknown material {spec.ply_material!r}; known: "
                          f"{sorted(materials)}", source=ctx.source)
    if not isinstance(mat, OrthotropicMaterial):
        raise ConfigError(f"{k}.ply_material", f"{spec.ply_material!r} is isotropic; plies need an "
                          "orthotropic material (E1, E2, G12...)", source=ctx.source)
    try:
        plies = tuple(Ply(material=mat, angle=a, thickness=spec.ply_thickness) for a in angles)
        return Laminate(plies=plies, zero_direction=spec.zero_direction,
                        coating=_layer(spec.coating, f"{k}.coating", materials, ctx),
                        resin_layer=_layer(spec.resin_layer, f"{k}.resin_layer", materials, ctx),
                        back_layer=_layer(spec.back_layer, f"{k}.back_layer", materials, ctx),
                        convection_front=spec.convection_front, convection_back=spec.convection_back,
                        name=name, layup_code=spec.layup if isinstance(spec.layup, str) else None)
    except MaterialError as e:
        raise ConfigError(f"{k}.{e.field}", str(e).split(": ", 1)[-1], source=ctx.source) from e
