"""Backgrounds of fitted wind fields: building one from a source string, describing and rebuilding it."""

from __future__ import annotations

from pathlib import Path

from balloonpath.errors import input_error
from balloonpath.winds.field import UniformField, WindField

__all__ = ["background_spec_of", "default_background_loader", "load_background"]


def background_spec_of(background: WindField) -> dict:
    """How a saved field refers to its background: a uniform wind's values, or a source path and type."""
    if isinstance(background, UniformField):
        return {"kind": "uniform", "u_m_s": background.u, "v_m_s": background.v}
    soundings = getattr(background, "soundings", None)
    if soundings and all(getattr(x, "path", None) for x in soundings):
        return {"kind": "soundings", "paths": [str(Path(x.path).resolve()) for x in soundings],
                "outside": getattr(background, "outside", "error")}
    for attr in ("source_path", "path"):
        p = getattr(background, attr, None)
        if p is not None:
            return {"kind": "file", "path": str(p), "type": type(background).__name__}
    return {"kind": type(background).__name__}


def load_background(source: str | Path, outside: str = "error") -> tuple[WindField, dict]:
    """A background from a source string, and its description for saved fields.

    ``uniform:U,V`` (m/s), a gridded forecast (``.nc``, ``.grib2``, ``.grb2``, ``.grb``: ``GridField.open``)
    or sounding CSV files / a folder of them (``sounding_field_from_paths``).
    """
    text = str(source)
    if text.startswith("uniform:"):
        try:
            u, v = (float(a) for a in text.split(":", 1)[1].split(","))
        except ValueError:
            raise input_error(None, "background", f"'{text}' is not uniform:U,V",
                              "write e.g. uniform:10,-2 (m/s east, north)") from None
        return UniformField(u, v), {"kind": "uniform", "u_m_s": u, "v_m_s": v}
    path = Path(text).resolve()
    if not path.exists():
        raise FileNotFoundError(2, "No such file", str(path))
    spec = {"kind": "file", "path": str(path), "outside": outside}
    if path.suffix.lower() in (".nc", ".nc4", ".grib2", ".grb2", ".grb", ".grib"):
        from balloonpath.winds.grid import GridField

        return GridField.open(path, outside=outside), spec
    from balloonpath.winds.sounding import sounding_field_from_paths

    return sounding_field_from_paths(path, outside=outside), spec


def default_background_loader(spec: dict) -> WindField:
    """Rebuild a background from its stored description (see :func:`load_background`)."""
    if spec.get("kind") == "uniform":
        return UniformField(spec["u_m_s"], spec["v_m_s"])
    if spec.get("kind") == "file":
        return load_background(spec["path"], spec.get("outside", "error"))[0]
    if spec.get("kind") == "soundings":
        from balloonpath.winds.sounding import sounding_field_from_paths

        return sounding_field_from_paths([Path(p) for p in spec["paths"]], outside=spec.get("outside", "error"))
    raise input_error(
        None, "background", f"cannot rebuild the background {spec} of this fitted field",
        "pass background_loader= to load_wind_field, or name the background in the plan's [winds] table",
    )
