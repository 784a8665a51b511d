"""The tables a config may hold, one dataclass each; every field carries its validator (a ``Key``)."""

from __future__ import annotations

from dataclasses import dataclass
from pathlib import Path

import numpy as np

from .._bounds import BOUNDS
from ..errors import ConfigError
from ..io import MAP_QUANTITIES
from . import _schema
from ._schema import key

RUN_NAME_PATTERN = r"[A-Za-z0-9][A-Za-z0-9_.\-]{0,99}"


def run_key(name, index: int) -> str:
    """How messages name a ``[[run]]``: ``run 'CX-2Hz'``, or ``run[3]`` while it has no usable name."""
    if isinstance(name, str) and 0 < len(name) <= 100 and name.isprintable():
        return f"run {name!r}"
    return f"run[{index}]"

# names a run folder cannot take: the campaign's own files, and device names of Windows shares
_RESERVED = ({"con", "prn", "aux", "nul", "figures", "report.html", "frequency.nc", "summary.json"}
             | {f"com{i}" for i in range(1, 10)} | {f"lpt{i}" for i in range(1, 10)})
_DEVICE_STEMS = ({"con", "prn", "aux", "nul"} | {f"com{i}" for i in range(1, 10)}
                 | {f"lpt{i}" for i in range(1, 10)})


# --------------------------------------------------------------------------- sections
@dataclass(frozen=True)
class LayerRef:
    """A surface layer: an isotropic material from ``[materials]`` and its thickness."""

    material: str = key(_schema.string(), "Name of an isotropic material in [materials].", required=True)
    thickness: float = key(_schema.quantity("m", positive=True), "Layer thickness.", unit="m", required=True)


@dataclass(frozen=True)
class LaminateSpec:
    """A laminate: plies listed from the viewed face inward, and optional surface layers."""

    layup: tuple = key(_schema.either(_schema.string(), _schema.list_of(_schema.quantity("deg"), min_len=1)),
                       "Ply angles in degrees from the viewed face inward, or a compact code such "
                       "as \"[45/0/-45/90]s\", \"[0/90]2s\", \"[±45]s\".", required=True)
    ply_material: str = key(_schema.string(), "Name of an orthotropic material in [materials].", required=True)
    ply_thickness: float = key(_schema.quantity("m", positive=True), "Cured ply thickness.", unit="m",
                               required=True)
    zero_direction: float = key(_schema.quantity("deg", low=-360, high=360),
                                "Angle of the laminate 0° direction from specimen x, CCW.",
                                unit="deg", default=0.0)
    resin_layer: LayerRef = key(_schema.table_of(LayerRef), "Resin-rich layer on the viewed face.")
    coating: LayerRef = key(_schema.table_of(LayerRef), "Paint or coating on the viewed face (outermost).")
    back_layer: LayerRef = key(_schema.table_of(LayerRef), "Resin-rich layer on the back face (heat model).")
    convection_front: float = key(_schema.quantity("W/m^2/K", nonnegative=True),
                                  "Heat-transfer coefficient of the viewed face (0: adiabatic).",
                                  unit="W/(m2 K)", default=0.0)
    convection_back: float = key(_schema.quantity("W/m^2/K", nonnegative=True),
                                 "Heat-transfer coefficient of the back face (0: adiabatic).",
                                 unit="W/(m2 K)", default=0.0)


@dataclass(frozen=True)
class ThermalSpec:
    """Infrared input of a run: exactly one of ``frames`` (raw stack) or ``maps`` (precomputed)."""

    frames: Path = key(_schema.path, "Frame stack (frame, row, col): .npy, .raw/.bin, .tif, .h5, .nc; or a "
                       "folder or glob pattern (\"ir/run3/*.tif\") of one file per frame: TIFF, PNG, "
                       ".npy or CSV/TXT grids, ordered by the number in their names.")
    maps: Path = key(_schema.path, "Precomputed maps (NetCDF/TIFF/CSV) with T0 and delta_T (or magnitude "
                     "and phase); see \"Input files\" above.")
    delta_T_convention: str = key(_schema.choice("peak-to-peak", "amplitude"), "What the maps' delta_T (and "
                                  "magnitude, quadrature, std) hold: the peak-to-peak range (maximum minus "
                                  "minimum load) or the amplitude (half of it). Required with 'maps'.")
    variables: dict = key(_schema.either(_schema.mapping_of_strings,
                                         _schema.list_of(_schema.choice(*MAP_QUANTITIES), min_len=2)),
                          "Map our quantity names (" + ", ".join(MAP_QUANTITIES) + ") to the maps "
                          "file's variable or column names, e.g. { delta_T = \"dT\" }; for a TIFF the page "
                          "order as a list.")
    frame_rate: float = key(_schema.quantity("Hz", positive=True), "Camera frame rate.", unit="Hz")
    times: Path = key(_schema.path, "Optional frame times: .npy, one time per line, or a table with a time "
                      "column and a file (name) or index (number in the name) column for sequences.")
    times_columns: dict = key(_schema.mapping_of_strings, "Map our column names of the times table (file, "
                              "index, time) to its header names.")
    name_time: str = key(_schema.string(), "Regular expression whose first group is the frame time in each "
                         "file name of a sequence, e.g. '_t([0-9.]+)ms'.")
    time_unit: float = key(_schema.quantity("s", positive=True), "Unit of the times in the times table and "
                           "the file names (\"1 ms\").", unit="s", default=1.0)
    frame_count: int = key(_schema.integer(low=1), "Frames expected: a sequence or stack with another count "
                           "is refused, and `fusion watch` waits for this many files.")
    done_marker: Path = key(_schema.path, "File whose appearance says the frame sequence is complete "
                            "(`fusion watch` waits for it).")
    decimal: str = key(_schema.choice(".", ","), "Decimal separator of text grids and the times table.",
                       default=".")
    load: Path = key(_schema.path, "Load signal CSV (columns time, load), per frame or on its own clock.")
    time_column: str = key(_schema.string(), "Name of the time column of the load file.", default="time")
    load_column: str = key(_schema.string(), "Name of the load column of the load file.", default="load")
    dataset: str = key(_schema.string(), "Dataset or variable name inside .h5/.nc frame stacks.")
    dtype: str = key(_schema.choice("uint8", "int16", "uint16", "int32", "uint32", "float32", "float64"),
                     "Element type of a headerless raw stack.")
    shape: tuple = key(_schema.list_of(_schema.integer(low=1), min_len=3, max_len=3),
                       "Shape [frames, rows, cols] of a headerless raw stack.")
    byte_order: str = key(_schema.choice("little", "big"), "Byte order of a raw stack.", default="little")
    header_bytes: int = key(_schema.integer(low=0), "Bytes to skip at the start of a raw stack.", default=0)
    values: str = key(_schema.choice("kelvin", "counts"), "Frames hold kelvin, or detector counts "
                      "calibrated as gain*counts + offset.", default="kelvin")
    gain: float = key(_schema.quantity("K", positive=True), "Kelvin per count (values = \"counts\").",
                      unit="K", default=1.0)
    offset: float = key(_schema.quantity("K"), "Kelvin at zero counts (values = \"counts\").", unit="K",
                        default=0.0)
    saturation: float = key(_schema.quantity(""), "Raw value at or above which a pixel is saturated.")
    motion_compensation: bool = key(_schema.boolean, "Warp frames back to the unloaded configuration "
                                    "from the correlation displacement before the lock-in.",
                                    default=False)

    def _check(self, prefix, ctx):
        if (self.frames is None) == (self.maps is None):
            raise ConfigError(prefix, "expected exactly one of 'frames' or 'maps'", source=ctx.source)
        if self.maps is not None and self.delta_T_convention is None:
            raise ConfigError(f"{prefix}.delta_T_convention", "is required with 'maps': say whether "
                              "delta_T holds the peak-to-peak range (\"peak-to-peak\", maximum minus minimum "
                              "load) or its half (\"amplitude\")", source=ctx.source)
        for name in ("delta_T_convention", "variables"):
            if self.maps is None and getattr(self, name) is not None:
                raise ConfigError(f"{prefix}.{name}", "applies to 'maps' only", source=ctx.source)
        if isinstance(self.variables, dict):
            unknown = sorted(set(self.variables) - set(MAP_QUANTITIES))
            if unknown:
                raise ConfigError(f"{prefix}.variables.{unknown[0]}", f"unknown quantity; expected some of "
                                  f"{', '.join(MAP_QUANTITIES)}", source=ctx.source)
        if (self.frames is not None and self.frame_rate is None and self.times is None and self.load is None
                and self.name_time is None):
            raise ConfigError(f"{prefix}.frame_rate", "is required with 'frames' (or give 'times', "
                              "or a load file whose time column matches the frames)", source=ctx.source)


@dataclass(frozen=True)
class DicSpec:
    """Correlation input of a run: exactly one of ``strain_ranges``, ``states``, ``series`` or ``images``."""

    strain_ranges: Path = key(_schema.path, "Field of peak-to-peak strain ranges (columns x, y, exx, eyy, gxy).")
    states: tuple = key(_schema.list_of(_schema.path, min_len=2, max_len=2),
                        "Displacement fields at minimum and maximum load (columns x, y, u, v).")
    series: tuple = key(_schema.list_of(_schema.path, min_len=3),
                        "Displacement fields at several loads (with 'loads'): slope fit.")
    images: tuple = key(_schema.either(_schema.list_of(_schema.path, min_len=2), _schema.path),
                        "Speckle images: a list (the reference first, then loaded states), or a folder "
                        "or glob pattern of TIFF/PNG images ordered by the number in their names.")
    loads: tuple = key(_schema.list_of(_schema.quantity("N")), "Load of each state, series entry or image (in "
                       "name order for an image folder).", unit="N")
    load_log: Path = key(_schema.path, "Log of the load at each image of a folder or pattern: columns image "
                         "(file name) or index (number in the name), load, optional time.")
    load_log_columns: dict = key(_schema.mapping_of_strings, "Map our column names of the load log (image, "
                                 "index, load, time) to its header names.")
    reference: str = key(_schema.string(), "File name of the reference image (default: the first listed, or "
                         "for a folder the image at minimum load).")
    image_count: int = key(_schema.integer(low=2), "Images expected in the folder: another count is refused, "
                           "and `fusion watch` waits for this many.")
    done_marker: Path = key(_schema.path, "File whose appearance says the image sequence is complete "
                            "(`fusion watch` waits for it).")
    decimal: str = key(_schema.choice(".", ","), "Decimal separator of the load log.", default=".")
    coordinates: str = key(_schema.choice("mm", "px"), "Units of the x, y columns.", default="mm")
    y_axis: str = key(_schema.choice("up", "down"), "Direction of the file's y axis (default: up for mm, "
                      "down for px).")
    shear: str = key(_schema.choice("engineering", "tensor"), "Shear column holds gamma_xy or eps_xy.",
                     default="engineering")
    strain_unit: str = key(_schema.choice("1", "%", "microstrain"), "Unit of the strain columns: plain strain "
                           "(\"1\", the default), percent or microstrain. A NetCDF/HDF5 variable's own "
                           "units attribute is honoured and must agree.")
    columns: dict = key(_schema.mapping_of_strings, "Map our column names (x, y, z, u, v, exx, eyy, gxy, "
                        "valid) to the file's header names.")
    subset: int = key(_schema.integer(low=7, high=301), "Subset size in px (images); `fusion gauge` "
                      "shows what each choice resolves.", default=25)
    step: int = key(_schema.integer(low=1, high=200), "Grid step in px (images).", default=3)
    strain_window: int = key(_schema.integer(low=3, high=51), "Points per side of the strain fit window "
                             "(defaults: a hole of 60 px radius resolved at gain 0.9).", default=7)
    strain_order: int = key(_schema.integer(low=1, high=2), "Polynomial order of the strain fit.", default=1)
    pixel_size: float = key(_schema.quantity("mm", positive=True), "Size of a visible-camera pixel on the "
                            "specimen (images; turns px into mm).", unit="mm")
    region: tuple = key(_schema.list_of(_schema.integer(low=0), min_len=4, max_len=4),
                        "Rectangle of the speckle images to correlate, [x0, y0, x1, y1] in visible-image "
                        "px: x counts columns, y rows (down from the top); columns x0 to x1 - 1, rows y0 "
                        "to y1 - 1.")
    roi: tuple = key(_schema.list_of(_schema.integer(low=0), min_len=4, max_len=4),
                     "Deprecated (removed in the next release): 'region' in (row, col) order, [row0, col0, "
                     "row1, col1]; write region = [col0, row0, col1, row1] instead.")
    mask: Path = key(_schema.path, "Mask image, same size as the speckle images: non-zero where to "
                     "correlate (leave out markers, holes, background).")
    reference_image: Path = key(_schema.path, "Visible reference image for the overlay figure.")

    def _check(self, prefix, ctx):
        given = [n for n in ("strain_ranges", "states", "series", "images") if getattr(self, n) is not None]
        if len(given) != 1:
            raise ConfigError(prefix, "expected exactly one of 'strain_ranges', 'states', 'series' or "
                              f"'images', got {given or 'none'}", source=ctx.source)
        if self.image_sequence:
            if (self.loads is None) == (self.load_log is None):
                raise ConfigError(f"{prefix}.load_log", "an image folder or pattern needs its loads: a "
                                  "load_log, or loads in name order (one of the two)", source=ctx.source)
            if self.loads is not None and self.image_count is not None and len(self.loads) != self.image_count:
                raise ConfigError(f"{prefix}.loads", f"expected {self.image_count} loads (image_count)",
                                  source=ctx.source)
        else:
            n = {"states": 2, "series": len(self.series or ()), "images": len(self.images or ())}.get(given[0])
            if given[0] == "states" and self.loads is not None and len(self.loads) != 2:
                raise ConfigError(f"{prefix}.loads", "expected 2 loads, one per entry of 'states' (minimum and "
                                  "maximum)", source=ctx.source)
            if given[0] in ("series", "images") and (self.loads is None or len(self.loads) != n):
                raise ConfigError(f"{prefix}.loads", f"expected {n} loads, one per entry of '{given[0]}'",
                                  source=ctx.source)
            extra = [k for k in ("load_log", "image_count", "done_marker") if getattr(self, k) is not None]
            if extra:
                raise ConfigError(f"{prefix}.{extra[0]}", "applies to images given as a folder or pattern",
                                  source=ctx.source)
        if self.loads is not None and len(set(self.loads)) < 2:
            raise ConfigError(f"{prefix}.loads", "expected at least two different loads", source=ctx.source)
        if self.images is not None and self.subset % 2 == 0:
            raise ConfigError(f"{prefix}.subset", f"expected an odd size in pixels (a subset is centred on a "
                              f"pixel), got {self.subset}: {self.subset - 1} or {self.subset + 1}", source=ctx.source)
        if self.pixel_size is not None:
            self._check_pixel_size(prefix, ctx)
        self._check_region(prefix, ctx)

    def _check_pixel_size(self, prefix, ctx):
        # the run checks it too (fusion.dic); here fusion check refuses it before any file is read
        b = BOUNDS["pixel_size"]
        v = float(self.pixel_size)
        if b.low <= v <= b.high:
            return
        hints = [f"{v * k:g} mm" for k in (1e-3, 1e3) if b.low <= v * k <= b.high]
        hint = f": {hints[0]} meant? (check the unit)" if hints else ""
        raise ConfigError(f"{prefix}.pixel_size", f"{v:g} mm per pixel is outside the plausible {b.low:g} .. "
                          f"{b.high:g} mm of a visible-camera pixel on the specimen{hint}", source=ctx.source)

    def _check_region(self, prefix, ctx):
        if self.region is not None and self.roi is not None:
            raise ConfigError(f"{prefix}.roi", "is the deprecated (row, col) spelling of 'region', and both "
                              "are given: keep 'region' only", source=ctx.source)
        name = "region" if self.region is not None else "roi"
        box = self.correlation_region
        if box is None:
            return
        if self.images is None:
            raise ConfigError(f"{prefix}.{name}", "applies to speckle images (dic.images) only: the "
                              "correlation data given are not cropped by it", source=ctx.source)
        x0, y0, x1, y1 = box
        if not (x1 > x0 and y1 > y0):
            order = "x1 > x0 and y1 > y0" if name == "region" else "row1 > row0 and col1 > col0"
            raise ConfigError(f"{prefix}.{name}", f"expected {order}, got {list(getattr(self, name))!r}",
                              source=ctx.source)

    @property
    def correlation_region(self) -> tuple | None:
        """The rectangle to correlate, (x0, y0, x1, y1) in visible-image px (``region``, or the
        deprecated ``roi`` turned into that order); None for the whole image."""
        if self.region is not None:
            return tuple(self.region)
        if self.roi is not None:
            row0, col0, row1, col1 = self.roi
            return (col0, row0, col1, row1)
        return None

    def deprecations(self, prefix: str) -> list[str]:
        """One sentence per deprecated key these data use, saying how to rewrite it."""
        if self.roi is None:
            return []
        new = list(self.correlation_region)
        return [f"{prefix}.roi is deprecated and read as region = {new} for this release only: replace "
                f"roi = {list(self.roi)} by region = {new} ([x0, y0, x1, y1]: columns first, in visible-image "
                "px)"]

    @property
    def image_sequence(self) -> bool:
        """True when ``images`` names a folder or pattern (resolved when the run is processed)."""
        return isinstance(self.images, Path)

    @property
    def effective_y_axis(self) -> str:
        return self.y_axis or ("up" if self.coordinates == "mm" else "down")

    def to_specimen(self, points_units=None) -> np.ndarray:
        """(3, 3) matrix from the coordinates the config uses for these data (control points,
        exclusions with frame = "dic") to the specimen frame the data are held in (x right,
        y up; mm or px).

        Files: their own x, y, y negated when the file's y points down. Images: the reference
        image's (col, row) px, or with ``points_units = "mm"`` (col, row) x pixel size; rows
        count down, and the data are in mm when ``pixel_size`` is given.
        """
        if self.images is None:
            return np.diag([1.0, -1.0 if self.effective_y_axis == "down" else 1.0, 1.0])
        k = 1.0 if (points_units == "mm" or self.pixel_size is None) else float(self.pixel_size)
        return np.diag([k, -k, 1.0])


@dataclass(frozen=True)
class ExcludeSpec:
    """A region left out of every map and statistic: one rectangle, circle or polygon."""

    rect: tuple = key(_schema.list_of(_schema.quantity(""), min_len=4, max_len=4),
                      "[x0, y0, x1, y1]: opposite corners.")
    circle: tuple = key(_schema.list_of(_schema.quantity(""), min_len=3, max_len=3), "[cx, cy, r].")
    polygon: tuple = key(_schema.list_of(_schema.point, min_len=3),
                         "[[x, y], ...]: three or more vertices in order.")
    frame: str = key(_schema.choice("ir", "dic"), "Coordinates of the shape: 'ir' = IR pixels [col, row]; "
                     "'dic' = the correlation data's own coordinates, as for dic_points.", default="ir")

    def _check(self, prefix, ctx):
        given = [n for n in ("rect", "circle", "polygon") if getattr(self, n) is not None]
        if len(given) != 1:
            raise ConfigError(prefix, f"expected exactly one of 'rect', 'circle' or 'polygon', got "
                              f"{given or 'none'}", source=ctx.source)
        if self.rect is not None:
            x0, y0, x1, y1 = self.rect
            if not (x1 > x0 and y1 > y0):
                raise ConfigError(f"{prefix}.rect", f"expected x1 > x0 and y1 > y0, got {list(self.rect)!r}",
                                  source=ctx.source)
        if self.circle is not None and not self.circle[2] > 0:
            raise ConfigError(f"{prefix}.circle", f"expected a positive radius, got {self.circle[2]!r}",
                              source=ctx.source)
        if self.polygon is not None:
            x = [v[0] for v in self.polygon]
            y = [v[1] for v in self.polygon]
            area = 0.5 * abs(sum(x[i] * y[i - 1] - x[i - 1] * y[i] for i in range(len(x))))
            span = max(max(x) - min(x), max(y) - min(y))
            if not area > 1e-9 * span * span:
                raise ConfigError(f"{prefix}.polygon", "the vertices enclose no area (repeated or on one "
                                  "line)", source=ctx.source)


@dataclass(frozen=True)
class RegistrationSpec:
    """How correlation coordinates map onto infrared pixels."""

    method: str = key(_schema.choice("homography", "affine", "similarity", "identity", "fiducials", "camera"),
                      "Transform model; 'identity': the correlation data sit on the IR pixel grid "
                      "(file x, y = IR col, row); 'fiducials' finds markers automatically; 'camera' "
                      "fits a pinhole model with distortion to 3D points.", default="homography")
    dic_points: tuple = key(_schema.list_of(_schema.either(
                                _schema.point, _schema.list_of(_schema.quantity(""), min_len=3, max_len=3))),
                            "Control points in the coordinates of the correlation data: the file's "
                            "own x, y (its unit, its y direction), or for images the reference "
                            "image's [col, row] ([x, y, z] for 'camera').")
    dic_points_units: str = key(_schema.choice("px", "mm"), "Unit of dic_points (default: that of the "
                                "correlation data; for images 'px'). With images, 'mm' means [col, row] "
                                "times dic.pixel_size, rows still counting down.")
    ir_points: tuple = key(_schema.list_of(_schema.point), "The same points in IR pixels [col, row].")
    ir_mirrored: bool = key(_schema.boolean, "The IR image is a mirror image of the visible camera's view "
                            "(a mirror in its optical path, a flipped read-out): the registration "
                            "then keeps orientation instead of reversing it.", default=False)
    ransac_threshold: float = key(_schema.quantity("", positive=True), "Outlier threshold in IR px "
                                  "(RANSAC); none for plain least squares.")
    max_error: float = key(_schema.quantity("", positive=True), "RMS reprojection error (IR px) above "
                           "which a warning is raised; a control point is called an outlier only "
                           "when the others place it farther off than this.", default=0.5)
    refine: bool = key(_schema.boolean, "Refine the transform by enhanced correlation of the measured "
                       "and predicted maps.", default=False)
    max_correction: float = key(_schema.quantity("", positive=True), "Largest refinement accepted, IR px.",
                                default=2.0)
    fiducials: int = key(_schema.integer(low=4, high=50), "Number of markers (method 'fiducials').")
    fiducial_radius_ir: tuple = key(_schema.list_of(_schema.quantity("", positive=True), min_len=2, max_len=2),
                                    "Marker radius range [min, max] in IR px (method 'fiducials').",
                                    default=(1.5, 8.0))
    fiducial_radius_visible: tuple = key(_schema.list_of(_schema.quantity("", positive=True), min_len=2,
                                                         max_len=2),
                                         "Marker radius range [min, max] in visible px; keep min "
                                         "above the speckle size.", default=(6.0, 40.0))
    fiducial_polarity_ir: str = key(_schema.choice("auto", "bright", "dark"), "Markers warmer ('bright') or "
                                    "colder ('dark') than the surface in the T0 map.", default="auto")
    fiducial_polarity_visible: str = key(_schema.choice("auto", "bright", "dark"), "Markers lighter or darker "
                                         "than the speckle in the visible image.", default="auto")
    max_rotation: float = key(_schema.quantity("deg", positive=True, high=179), "Largest rotation between the "
                              "cameras (method 'fiducials'; rules out symmetric twins of the marker "
                              "layout).", unit="deg", default=45.0)
    marker_radius: float = key(_schema.quantity("", positive=True), "The control points are centres of "
                               "markers of this radius, IR px: their pixels become no data. Markers "
                               "found by method 'fiducials' are masked with their measured radius.")
    marker_margin: float = key(_schema.quantity("", nonnegative=True), "IR px of no data added around every "
                               "marker (optics blur, centre error).", default=1.0)
    exclude: tuple = key(_schema.list_of(_schema.table_of(ExcludeSpec)), "Regions to leave out of every map and "
                         "statistic.", factory=tuple)

    def _check(self, prefix, ctx):
        needs_points = self.method in ("homography", "affine", "similarity", "camera")
        if needs_points and (self.dic_points is None or self.ir_points is None):
            raise ConfigError(f"{prefix}.dic_points", f"method {self.method!r} needs 'dic_points' and "
                              "'ir_points'", source=ctx.source)
        if (self.dic_points is not None and self.ir_points is not None
                and len(self.dic_points) != len(self.ir_points)):
            raise ConfigError(f"{prefix}.ir_points", f"expected {len(self.dic_points)} points, as many "
                              f"as dic_points, got {len(self.ir_points)}", source=ctx.source)
        if self.method == "fiducials" and self.fiducials is None:
            raise ConfigError(f"{prefix}.fiducials", "method 'fiducials' needs the number of markers",
                              source=ctx.source)
        if self.marker_radius is not None and self.method not in ("homography", "affine", "similarity",
                                                                  "camera"):
            raise ConfigError(f"{prefix}.marker_radius", f"marks markers at the control points; method "
                              f"{self.method!r} has none (markers found by 'fiducials' are masked "
                              "with their measured radius)", source=ctx.source)


@dataclass(frozen=True)
class RegionSpec:
    """A named region of the IR grid for the region table: a rectangle, a circle or a mask image."""

    name: str = key(_schema.string(pattern=r"[^\x00-\x1f]{1,60}", hint="1-60 printable characters"),
                    "Label in tables.", required=True)
    rect: tuple = key(_schema.list_of(_schema.quantity(""), min_len=4, max_len=4), "[x0, y0, x1, y1] in IR px.")
    circle: tuple = key(_schema.list_of(_schema.quantity(""), min_len=3, max_len=3), "[cx, cy, r] in IR px.")
    mask: Path = key(_schema.path, "Image (non-zero inside) on the IR grid.")

    def _check(self, prefix, ctx):
        if sum(v is not None for v in (self.rect, self.circle, self.mask)) != 1:
            raise ConfigError(prefix, "expected exactly one of 'rect', 'circle' or 'mask'", source=ctx.source)


@dataclass(frozen=True)
class CalibrationSpec:
    """Calibrate the infrared measurement on a region whose source is known."""

    region: str = key(_schema.string(), "Name of a region in diagnosis.regions.", required=True)
    source: str = key(_schema.choice("coating", "resin_layer", "surface_ply", "laminate", "model", "lateral"),
                      "The source known to dominate there.", required=True)


_SOURCE = _schema.choice("coating", "resin_layer", "surface_ply", "laminate", "model")
_LATERAL = _schema.choice("off", "beside", "instead")
_LATERAL_DOC = ("Heat flowing along the surface as well as through the thickness: 'beside' adds the "
                "lateral heat model (source 'lateral': the layered plate driven by the registered strain "
                "maps, solved over the infrared grid; needs correlation coordinates in mm and a 2-D "
                "registration) next to the through-thickness model 'model'; 'instead' replaces 'model' by "
                "it; 'off' leaves it out.")


@dataclass(frozen=True)
class DiagnosisSpec:
    """How measurement and predictions are compared."""

    sources: tuple = key(_schema.list_of(_SOURCE, min_len=1), "Sources to evaluate (default: every source "
                         "the laminate has, and the heat model).")
    property_uncertainty: float = key(_schema.quantity("", nonnegative=True, high=1.0),
                                      "Relative standard uncertainty of the material properties.",
                                      default=0.05)
    fit_threshold: float = key(_schema.quantity("", positive=True), "|z| above which a source does not fit.",
                               default=3.0)
    distinguish: float = key(_schema.quantity("", positive=True), "Predictions closer than this many "
                             "combined sigmas are indistinguishable.", default=1.0)
    min_snr: float = key(_schema.quantity("", nonnegative=True), "Pixels below this lock-in SNR are invalid.",
                         default=2.0)
    regions: tuple = key(_schema.list_of(_schema.table_of(RegionSpec)), "Named regions for the region table.",
                         factory=tuple)
    calibration: CalibrationSpec = key(_schema.table_of(CalibrationSpec), "Optional calibration region.")
    lateral_heat: str = key(_LATERAL, _LATERAL_DOC, default="off")


@dataclass(frozen=True)
class ComputeSpec:
    """Where and how runs are computed."""

    workers: int = key(_schema.integer(low=1, high=1024), "Runs processed at once (default: the cores, "
                       "limited to available memory / (memory_budget + 400 MB)).")
    memory_budget: float = key(_schema.quantity("B", positive=True), "Memory a run may use for its "
                               "per-pixel maps and frame chunks, and for correlating its speckle images "
                               "(frames or images too large for it are refused from the file's header).",
                               unit="B", default=2e9)
    scheduler: str = key(_schema.string(pattern=r"(tcp|tls|inproc)://\S+|processes|threads|synchronous",
                                        hint="expected tcp://HOST:PORT, 'processes', 'threads' or "
                                             "'synchronous'"),
                         "Dask scheduler: 'processes' (local worker processes, the default for more "
                         "than one run), 'synchronous' (one by one in this process), 'threads' (runs "
                         "one at a time: the file libraries are not safe side by side in one process) "
                         "or tcp://HOST:PORT of a dask.distributed cluster whose workers see the same "
                         "paths.")


@dataclass(frozen=True)
class OutputSpec:
    """Where results go and which figures are made."""

    folder: Path = key(_schema.path, "Output folder (default: 'results' beside the config).")
    figures: bool = key(_schema.boolean, "Write figures.", default=True)
    formats: tuple = key(_schema.list_of(_schema.choice("png", "pdf"), min_len=1), "Figure formats.",
                         default=("png",))
    dpi: int = key(_schema.integer(low=50, high=1200), "Resolution of PNG figures, dots per inch: 150 "
                   "suits a screen; 300 or more for print (or formats = [\"pdf\"]).", default=150)
    profile_line: tuple = key(_schema.list_of(_schema.point, min_len=2, max_len=2),
                              "Line [[x0, y0], [x1, y1]] in IR px for the profile figure.")
    report: bool = key(_schema.boolean, "Write report.html.", default=True)


@dataclass(frozen=True)
class PlanSpec:
    """The strain state and frequencies of ``fusion plan``."""

    strain: float = key(_schema.quantity("", positive=True), "Strain range along the load axis "
                        "(\"1000 microstrain\").", default=1e-3)
    direction: float = key(_schema.quantity("deg"), "Load axis, degrees from specimen x.", unit="deg",
                           default=0.0)
    f_min: float = key(_schema.quantity("Hz", positive=True), "Lowest frequency.", unit="Hz", default=0.1)
    f_max: float = key(_schema.quantity("Hz", positive=True), "Highest frequency.", unit="Hz", default=200.0)
    count: int = key(_schema.integer(low=3, high=2000), "Number of log-spaced frequencies.", default=121)
    tolerance: float = key(_schema.quantity("", positive=True, high=0.5), "Band tolerance (relative).",
                           default=0.02)
    laminate: str = key(_schema.string(), "Laminate to plan (default: [laminate]).")


@dataclass(frozen=True)
class RunSpec:
    """One paired infrared/correlation run."""

    name: str = key(_schema.string(pattern=RUN_NAME_PATTERN, hint="letters, digits, - _ . only, "
                                                                  "starting with a letter or digit, at most "
                                                                  "100 characters"),
                    "Run name; becomes its output folder name.", required=True)
    specimen: str = key(_schema.string(pattern=r"[^\x00-\x1f]{1,100}", hint="1-100 printable characters"),
                        "Specimen; runs of one specimen at several frequencies form a sweep.")
    frequency: float = key(_schema.quantity("Hz", positive=True), "Loading frequency, checked against the "
                           "load signal (replaced by its estimate when they differ beyond its "
                           "uncertainty and within 10 %); optional with a load signal sampled at least "
                           "twice as fast as the frames.", unit="Hz")
    laminate: str = key(_schema.string(), "Name of a laminate in [laminates] (default: [laminate]).")
    description: str = key(_schema.string(), "Free text for the report.")
    thermal: ThermalSpec = key(_schema.table_of(ThermalSpec), "Infrared input.", required=True)
    dic: DicSpec = key(_schema.table_of(DicSpec), "Correlation input.", required=True)
    registration: RegistrationSpec = key(_schema.table_of(RegistrationSpec), "Per-run registration "
                                         "(replaces the top-level [registration]).")
    lateral_heat: str = key(_LATERAL, "The lateral heat model for this run: 'off', 'beside' or "
                            "'instead' (default: diagnosis.lateral_heat).")

    @property
    def config_key(self) -> str:
        """The dotted-key prefix of this run in messages, e.g. ``run 'CX-2Hz'``."""
        return run_key(self.name, 0)

    def deprecations(self) -> list[str]:
        """One sentence per deprecated key this run uses, saying how to rewrite it."""
        return self.dic.deprecations(f"{self.config_key}.dic")

    def _check(self, prefix, ctx):
        low = self.name.lower()
        if low in _RESERVED or low.split(".")[0] in _DEVICE_STEMS or low.endswith("."):
            raise ConfigError(f"{prefix}.name", f"{self.name!r} is a reserved name (or ends with a dot); "
                              "choose another run name", source=ctx.source)
        if self.dic.states is not None and self.dic.loads is not None and self.thermal.load is None:
            raise ConfigError(f"{prefix}.dic.loads", "rescales the ranges of 'states' to the load signal's "
                              "range, but the run has no thermal.load: give the load signal, or leave loads "
                              "out (the states are then the minimum and maximum of the cycle)", source=ctx.source)
        if self.frequency is None and (self.thermal.load is None or self.thermal.maps is not None):
            raise ConfigError(f"{prefix}.frequency", "is required with precomputed maps or when no "
                              "load signal is given (e.g. frequency = \"10 Hz\")", source=ctx.source)


@dataclass(frozen=True)
class CampaignSpec:
    """Labels for the report."""

    name: str = key(_schema.string(), "Campaign title.", default="fusion campaign")
    description: str = key(_schema.string(), "Free text for the report header.", default="")
    operator: str = key(_schema.string(), "Who ran the tests (optional).")


@dataclass(frozen=True)
class TopLevel:
    """The keys a config file may hold at its top level."""

    campaign: CampaignSpec = key(_schema.table_of(CampaignSpec), "Labels for the report.")
    material_library: tuple = key(_schema.either(_schema.list_of(_schema.path), _schema.path),
                                  "TOML file(s) with more [materials.NAME] tables (e.g. materials.toml).")
    materials: dict = key(lambda v, k, c: v, "Material tables [materials.NAME] (see below).",
                          type_name="tables", factory=dict)
    laminate: LaminateSpec = key(_schema.table_of(LaminateSpec), "The default laminate.")
    laminates: dict = key(lambda v, k, c: v, "Further named laminates [laminates.NAME].",
                          type_name="tables", factory=dict)
    run: tuple = key(lambda v, k, c: v, "The runs [[run]].", type_name="array of tables", factory=tuple)
    registration: RegistrationSpec = key(_schema.table_of(RegistrationSpec), "Registration for all runs.")
    diagnosis: DiagnosisSpec = key(_schema.table_of(DiagnosisSpec), "Diagnosis settings.")
    compute: ComputeSpec = key(_schema.table_of(ComputeSpec), "Compute settings.")
    output: OutputSpec = key(_schema.table_of(OutputSpec), "Output settings.")
    plan: PlanSpec = key(_schema.table_of(PlanSpec), "Settings of `fusion plan`.")


@dataclass(frozen=True)
class OrthotropicSpec:
    """An orthotropic ply material (UD ply in its material axes, 1 along the fibres)."""

    E1: float = key(_schema.quantity("Pa"), "Modulus along the fibres.", unit="Pa", required=True)
    E2: float = key(_schema.quantity("Pa"), "Transverse modulus.", unit="Pa", required=True)
    G12: float = key(_schema.quantity("Pa"), "In-plane shear modulus.", unit="Pa", required=True)
    nu12: float = key(_schema.quantity(""), "Major Poisson ratio.", required=True)
    alpha1: float = key(_schema.quantity("1/K"), "Expansion coefficient along the fibres.", unit="1/K",
                        required=True)
    alpha2: float = key(_schema.quantity("1/K"), "Transverse expansion coefficient.", unit="1/K", required=True)
    density: float = key(_schema.quantity("kg/m^3"), "Density.", unit="kg/m3", required=True)
    specific_heat: float = key(_schema.quantity("J/kg/K"), "Specific heat.", unit="J/(kg K)", required=True)
    k1: float = key(_schema.quantity("W/m/K"), "Conductivity along the fibres.", unit="W/(m K)", required=True)
    k2: float = key(_schema.quantity("W/m/K"), "Transverse in-plane conductivity.", unit="W/(m K)", required=True)
    k3: float = key(_schema.quantity("W/m/K"), "Through-thickness conductivity.", unit="W/(m K)", required=True)
    source: str = key(_schema.string(), "Where the values come from (shown in reports).")


@dataclass(frozen=True)
class IsotropicSpec:
    """An isotropic material (resin, paint, metal)."""

    E: float = key(_schema.quantity("Pa"), "Young's modulus.", unit="Pa", required=True)
    nu: float = key(_schema.quantity(""), "Poisson ratio.", required=True)
    alpha: float = key(_schema.quantity("1/K"), "Expansion coefficient.", unit="1/K", required=True)
    density: float = key(_schema.quantity("kg/m^3"), "Density.", unit="kg/m3", required=True)
    specific_heat: float = key(_schema.quantity("J/kg/K"), "Specific heat.", unit="J/(kg K)", required=True)
    k: float = key(_schema.quantity("W/m/K"), "Thermal conductivity.", unit="W/(m K)", required=True)
    source: str = key(_schema.string(), "Where the values come from (shown in reports).")
