"""Build of the optional compiled transmission kernel (everything else is in pyproject.toml).

The extension is optional: where no C compiler is found the build goes on
and :mod:`physics.transmission` uses its numpy implementation (same numbers,
about six times slower).
"""

from setuptools import Extension, setup
from setuptools.command.build_ext import build_ext

# gcc/clang: no errno from libm (lets sqrt and libm calls vectorise); sin and cos stay
# separate calls (gcc would otherwise fuse them into a scalar sincos)
UNIX_FLAGS = ["-O3", "-fno-math-errno", "-fopenmp-simd", "-fno-builtin-sin", "-fno-builtin-cos"]


class BuildKernel(build_ext):
    def build_extensions(self):
        unix = self.compiler.compiler_type == "unix"
        for ext in self.extensions:
            ext.extra_compile_args = UNIX_FLAGS if unix else ["/O2"]
            if unix and _has_libmvec(self):  # x86-64 glibc: SIMD sin, cos, exp, log
                ext.define_macros = [("WW_HAVE_LIBMVEC", "1")]
                ext.libraries = ["mvec", "m"]
        super().build_extensions()


def _has_libmvec(cmd: build_ext) -> bool:
    try:
        return cmd.compiler.has_function("exp", libraries=["mvec", "m"])
    except Exception:  # noqa: BLE001 - any probe failure means: build without it
        return False


setup(
    ext_modules=[Extension("physics._slices", sources=["physics/_slices.c"], optional=True)],
    cmdclass={"build_ext": BuildKernel},
)
