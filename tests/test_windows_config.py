"""Windows of a space (config/windows.py): what the example declares, and bad windows refused
with file, line and what is wrong."""

from __future__ import annotations

import pathlib
import textwrap

import pytest

from tests.conftest import REPO
from thermowarden.config import ConfigError, load_site

SITE = """\
site:
  id: test-site
  latitude: 52.2
  longitude: -1.5
spaces:
  - id: room-1
    points:
      - topic: t/room-1/temp
        quantity: air_temperature
      - topic: t/room-1/blinds
        quantity: shading_position
    windows:
      - facade_azimuth: 270
        transmittance: 0.4
        shading_point: t/room-1/blinds
"""


def write(tmp_path: pathlib.Path, text: str) -> pathlib.Path:
    p = tmp_path / "site.yaml"
    p.write_text(textwrap.dedent(text), encoding="utf-8")
    return p


def issues(path: pathlib.Path) -> list[str]:
    with pytest.raises(ConfigError) as exc:
        load_site(path, {})
    return [str(i) for i in exc.value.issues]


def test_the_example_west_office_declares_its_windows() -> None:
    config = load_site(REPO / "deploy" / "example-site.yaml", {})
    office = next(s for s in config.spaces if s.id == "office-west")
    (w,) = office.windows
    assert w.facade_azimuth == 270 and w.facade_name == "west" and w.tilt == 90
    assert w.overhang is not None and w.overhang.depth_m == 0.3
    assert w.shading_point == "larkfield/office-west/blinds"
    assert config.site.latitude is not None and config.site.longitude is not None
    assert all(not s.windows for s in config.spaces if s.id != "office-west")


def test_a_valid_window_loads(tmp_path: pathlib.Path) -> None:
    config = load_site(write(tmp_path, SITE), {})
    (w,) = config.spaces[0].windows
    assert w.transmittance == 0.4 and w.posture == "sitting" and w.horizon == 0.0


def test_windows_without_the_site_position_are_refused_at_their_line(tmp_path: pathlib.Path
                                                                     ) -> None:
    p = write(tmp_path, SITE.replace("  latitude: 52.2\n  longitude: -1.5\n", ""))
    (msg,) = issues(p)
    assert msg.startswith(f"{p}:10:5: spaces.0.windows: windows need the site's position")


def test_a_shading_point_that_is_not_the_spaces_is_named(tmp_path: pathlib.Path) -> None:
    p = write(tmp_path, SITE.replace("shading_point: t/room-1/blinds",
                                     "shading_point: t/room-1/blind"))
    (msg,) = issues(p)
    assert msg.startswith(f"{p}:15:24: spaces.0.windows.0.shading_point: 't/room-1/blind' "
                          "is not a shading_position point")
    assert "'t/room-1/blinds'" in msg


@pytest.mark.parametrize("change,line,expected", [
    ("facade_azimuth: 270", "facade_azimuth: 400", "less than 360"),
    ("transmittance: 0.4", "transmittance: 1.4", "less than or equal to 1"),
    ("transmittance: 0.4", "transmittance: 0.4\n        overhang: {depth_m: 0.3}",
     "glazing_height_m: Field required"),
    ("transmittance: 0.4", "transmittance: 0.4\n        tilt: 10\n"
     "        overhang: {depth_m: 0.3, glazing_height_m: 1}", "not a roof light"),
    ("transmittance: 0.4", "transmittance: 0.4\n        posture: supine", "'sitting'"),
    ("transmittance: 0.4", "transmittance: 0.4\n        facade: west", "unknown key 'facade'"),
])
def test_bad_windows_are_refused_with_position(tmp_path: pathlib.Path, change: str, line: str,
                                               expected: str) -> None:
    p = write(tmp_path, SITE.replace(change, line))
    (msg,) = issues(p)
    assert msg.startswith(f"{p}:") and "spaces.0.windows.0" in msg and expected in msg


def test_check_warns_of_windows_no_rule_reads(tmp_path: pathlib.Path) -> None:
    """Windows serve only the sun-on-the-facade advice (pack ahead): a space that declares
    them without that pack gets a warning from check, with what to do."""
    from thermowarden.site_check import check_site

    report = check_site(str(write(tmp_path, SITE)))  # default packs: no ahead
    assert report.ok, [str(i) for i in report.issues]
    (w,) = [w for w in report.warnings if "windows" in w]
    assert w.startswith("space room-1: declares windows, but none of its rule packs")
    assert "add ahead to its rule_packs" in w
    with_ahead = SITE.replace("    windows:", "    rule_packs: [comfort, ahead]\n    windows:")
    report = check_site(str(write(tmp_path, with_ahead)))
    assert report.ok and not [w for w in report.warnings if "declares windows" in w]
    example = check_site(str(REPO / "deploy" / "example-site.yaml"))
    assert not [w for w in example.warnings if "declares windows" in w]
