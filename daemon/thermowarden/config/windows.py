"""Windows of a space: the facade they are on and what stands in the sun's way, for the
sun-on-the-facade forecast (:mod:`thermowarden.core.facade_sun`)."""

from __future__ import annotations

from typing import Literal

from pydantic import Field, model_validator

from thermowarden.config.base import Strict


class OverhangConfig(Strict):
    """A horizontal overhang (brise-soleil, balcony, deep reveal) above the glazing:
    ``depth_m`` out from the glass, ``gap_m`` from the top of the glazing up to it, over
    glazing ``glazing_height_m`` tall."""

    depth_m: float = Field(gt=0, le=10)
    gap_m: float = Field(0.0, ge=0, le=10)
    glazing_height_m: float = Field(gt=0, le=20)


class WindowConfig(Strict):
    """One window, or a row of windows on one facade, of a space.

    ``facade_azimuth``: the direction the facade faces, degrees clockwise from north (west
    270); ``tilt``: 90 vertical (default), 0 a roof light; ``transmittance``: total solar
    transmittance of the glazing without blinds (g-value, 0-1); ``overhang`` or
    ``horizon``: what shades it (``horizon``: the altitude of buildings or trees in front,
    degrees); ``shading_point``: the topic of the shading position point that covers it
    (default: the space's only one); for the person nearest it (ASHRAE 55 Appendix C):
    ``sky_view_fraction`` (0.3), ``body_in_sun`` (0.5), ``absorptivity`` (0.7),
    ``posture`` (sitting or standing) and ``facing`` (0 facing the window, 90 side on,
    180 back to it)."""

    name: str | None = None
    facade_azimuth: float = Field(ge=0, lt=360)
    tilt: float = Field(90.0, ge=0, le=90)
    transmittance: float = Field(ge=0, le=1)
    overhang: OverhangConfig | None = None
    horizon: float = Field(0.0, ge=0, lt=90)
    shading_point: str | None = None
    sky_view_fraction: float = Field(0.3, ge=0, le=1)
    body_in_sun: float = Field(0.5, ge=0, le=1)
    absorptivity: float = Field(0.7, gt=0, le=1)
    posture: Literal["sitting", "standing"] = "sitting"
    facing: float = Field(0.0, ge=0, le=180)

    @model_validator(mode="after")
    def _overhang_on_a_wall(self) -> WindowConfig:
        if self.overhang is not None and self.tilt < 45:
            raise ValueError("an overhang shades a wall window (tilt 45-90), not a roof light")
        return self

    @property
    def facade_name(self) -> str:
        """The facade in words: north, north-east, ... (eight points of the compass)."""
        names = ("north", "north-east", "east", "south-east", "south", "south-west", "west",
                 "north-west")
        return names[int((self.facade_azimuth + 22.5) // 45) % 8]
