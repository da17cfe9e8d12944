"""Every public name the two packages list resolves (the lazy surface stays honest), and
forward never imports inversion (the layering of DEVELOPERS.md)."""

import subprocess
import sys

import forward
import inversion


def test_every_public_name_resolves():
    for package in (forward, inversion):
        for name in package.__all__:
            assert getattr(package, name) is not None, f"{package.__name__}.{name}"


def test_forward_does_not_import_inversion():
    code = ("import sys, forward; m = forward.ForwardModel; "
            "import forward._model, forward._kernel, forward._runfile; "
            "assert not any(k == 'inversion' or k.startswith('inversion.') for k in sys.modules)")
    subprocess.run([sys.executable, "-c", code], check=True)
