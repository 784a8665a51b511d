"""``fusion check`` of one run: every input opened far enough to know it can be read."""

from __future__ import annotations

from ..errors import InputError
from ..io import read_dic_field, read_image, read_load_signal, read_thermal_maps
from ._files import need_file
from ._inputs import frame_times, open_thermal_frames, speckle_images

__all__ = ["check_run_inputs"]


def check_run_inputs(cfg, run, *, key) -> str:
    """Open every input of a run far enough to check it; return a one-line description."""
    t, d = run.thermal, run.dic
    parts = []
    sig = None
    if t.frames is not None:
        fr = open_thermal_frames(t, key=f"{key}.thermal")
        seq = getattr(fr, "sequence", None)
        where = f" in {len(seq)} {seq.kind} files" if seq is not None else ""
        parts.append(f"{fr.shape[0]} frames of {fr.shape[1]}x{fr.shape[2]} {fr.dtype}{where}")
    else:
        maps = read_thermal_maps(need_file(t.maps, f"{key}.thermal.maps"))
        parts.append(f"maps {maps['T0'].shape[0]}x{maps['T0'].shape[1]}")
    if t.load is not None:
        sig = read_load_signal(need_file(t.load, f"{key}.thermal.load"), time_column=t.time_column,
                               load_column=t.load_column)
        parts.append(f"load signal of {sig.times.size} samples")
    if t.frames is not None:
        # read, not only found: damaged or mismatched frame times should fail here, not in the run
        frame_times(t, fr, sig)
    if d.strain_ranges is not None:
        f = read_dic_field(need_file(d.strain_ranges, f"{key}.dic.strain_ranges"), columns=d.columns,
                           coordinates=d.coordinates, y_axis=d.effective_y_axis, shear=d.shear)
        parts.append(f"strain ranges at {f.x.size} points")
    for name in ("states", "series"):
        for i, p in enumerate(getattr(d, name) or ()):
            f = read_dic_field(need_file(p, f"{key}.dic.{name}[{i}]"), columns=d.columns,
                               coordinates=d.coordinates, y_axis=d.effective_y_axis, shear=d.shear)
        if getattr(d, name):
            parts.append(f"{len(getattr(d, name))} displacement fields of {f.x.size} points")
    if d.images is not None:
        images = speckle_images(d)
        first = read_image(need_file(images.paths[0], f"{key}.dic.images")).shape
        for p in images.paths[1:]:
            shape = read_image(need_file(p, f"{key}.dic.images")).shape
            if shape != first:
                raise InputError(p, f"is a {shape[0]}x{shape[1]} image, the reference {images.paths[0].name} "
                                 f"{first[0]}x{first[1]}: every speckle image must have one size")
        parts.append(f"{len(images.paths)} speckle images of {first}")
    if d.reference_image is not None:
        read_image(need_file(d.reference_image, f"{key}.dic.reference_image"))
    return ", ".join(parts)
