"""Build hook for chainrun's one optional C extension; everything else is in pyproject.toml.

chainrun.dsp._cascade is a compiled biquad cascade giving the same bytes as
scipy.signal.sosfilt, faster (chainrun/dsp/compiled.py, DEVELOPERS.md "The compiled cascade").
It is optional: without a C compiler or Python's headers the build prints a warning, the
install goes on, and chainrun filters with scipy's sosfilt.
"""
import hashlib
from pathlib import Path

from setuptools import Extension, setup
from setuptools.command.build_ext import build_ext

SOURCE = "chainrun/dsp/_cascade.c"
# The source's digest is built into the module; kernel.py refuses a build whose digest does not
# match a _cascade.c lying beside it (a stale in-place build after an edit of the source).
DIGEST = hashlib.sha256((Path(__file__).parent / SOURCE).read_bytes()).hexdigest()


class BuildExact(build_ext):
    """Compiler flags that keep every rounding of the C code: no FMA contraction, no fast math."""

    def build_extensions(self):
        if self.compiler.compiler_type == "msvc":
            flags = ["/fp:precise"]
        else:
            flags = ["-O2", "-ffp-contract=off", "-fno-fast-math"]
        for ext in self.extensions:
            ext.extra_compile_args = flags + list(ext.extra_compile_args or [])
        super().build_extensions()


setup(
    ext_modules=[Extension("chainrun.dsp._cascade", [SOURCE], optional=True,
                           define_macros=[("CASCADE_SOURCE_DIGEST", f'"{DIGEST}"')])],
    cmdclass={"build_ext": BuildExact},
)
