"""Adds the start-up hook ``shortcut_gym_startup.pth`` to regular and editable installs.

Everything else about the package lives in ``pyproject.toml``.
"""

import os

from setuptools import setup
from setuptools.command.build_py import build_py
from setuptools.command.editable_wheel import editable_wheel

PTH = "shortcut_gym_startup.pth"


class BuildPyWithStartupHook(build_py):
    """build_py that also places the .pth file at the top of the install."""

    def find_package_modules(self, package: str, package_dir: str) -> list:
        # the root package maps to the project folder: ship its modules, not this build script
        found = super().find_package_modules(package, package_dir)
        return [m for m in found if not (package == "shortcut_gym" and m[1] == "setup")]

    def run(self) -> None:
        super().run()
        self.copy_file(PTH, os.path.join(self.build_lib, PTH), preserve_mode=0)

    def get_outputs(self, include_bytecode: bool = True) -> list:
        return [*super().get_outputs(include_bytecode), os.path.join(self.build_lib, PTH)]

    def get_output_mapping(self) -> dict:
        mapping = dict(super().get_output_mapping())
        mapping[os.path.join(self.build_lib, PTH)] = PTH
        return mapping


class _StrategyWithStartupHook:
    """Wraps setuptools' editable strategy so the editable wheel carries the .pth too."""

    def __init__(self, inner) -> None:
        self.inner = inner

    def __enter__(self):
        self.inner.__enter__()
        return self

    def __exit__(self, *exc):
        return self.inner.__exit__(*exc)

    def __call__(self, wheel, files, mapping) -> None:
        self.inner(wheel, files, mapping)
        with open(os.path.join(os.path.dirname(os.path.abspath(__file__)), PTH)) as f:
            wheel.writestr(PTH, f.read())


class EditableWheelWithStartupHook(editable_wheel):
    """editable_wheel whose wheel also installs the start-up hook."""

    def _select_strategy(self, name, tag, build_lib):
        return _StrategyWithStartupHook(super()._select_strategy(name, tag, build_lib))


setup(cmdclass={"build_py": BuildPyWithStartupHook, "editable_wheel": EditableWheelWithStartupHook})
