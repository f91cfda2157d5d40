"""Build hook: ship the top-level recipes/ and masks/ inside the wheel (one copy in the repo)."""

import shutil
from pathlib import Path

from setuptools import setup
from setuptools.command.build_py import build_py


class BuildWithShipped(build_py):
    def run(self):
        super().run()
        here = Path(__file__).resolve().parent
        target = Path(self.build_lib) / "initgen" / "_shipped"
        for name in ("recipes", "masks"):
            src = here / name
            if src.is_dir():
                dst = target / name
                if dst.exists():
                    shutil.rmtree(dst)
                shutil.copytree(src, dst)


setup(cmdclass={"build_py": BuildWithShipped})
