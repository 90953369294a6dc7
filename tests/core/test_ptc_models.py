"""A process pays only for the pythermalcomfort models it calls (core/ptc_models.py), and the
library still looks as it ships to anyone else who imports it."""

from __future__ import annotations

import subprocess
import sys
import textwrap


def _run(code: str) -> str:
    out = subprocess.run([sys.executable, "-c", textwrap.dedent(code)], capture_output=True,
                         text=True, timeout=600, check=True)
    return out.stdout.strip()


def test_one_model_imports_one_module_and_the_package_stays_whole() -> None:
    got = _run("""
        import sys, types
        from thermowarden.core.ptc_models import model
        utci = model("utci")
        print("jos3" , "pythermalcomfort.models.jos3" in sys.modules)
        print("utci function", isinstance(utci, types.FunctionType))
        # anyone else importing from the package gets the library's own names
        from pythermalcomfort.models import set_tmp, utci as utci2
        print("set_tmp function", isinstance(set_tmp, types.FunctionType))
        print("same utci", utci2 is utci)
        print("jos3 after", "pythermalcomfort.models.jos3" in sys.modules)
    """)
    assert got.splitlines() == ["jos3 False", "utci function True", "set_tmp function True",
                                "same utci True", "jos3 after True"]


def test_utci_through_the_deferred_ufunc_matches_the_library() -> None:
    # Broede et al. (2012) UTCI through pythermalcomfort, once with its ufunc deferred and
    # once imported the library's way, in two processes: the same number.
    through_model = _run("""
        from thermowarden.core.ptc_models import model
        print(float(model("utci")(tdb=30.0, tr=40.0, v=1.0, rh=50.0).utci))
    """)
    plain = _run("""
        from pythermalcomfort.models import utci
        print(float(utci(tdb=30.0, tr=40.0, v=1.0, rh=50.0).utci))
    """)
    assert through_model == plain
