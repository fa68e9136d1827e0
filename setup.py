"""Build of the optional compiled transmission kernel (everything else is in pyproject.toml).

The extension is optional: where no C compiler is found the build goes on
and :mod:`wellwright.physics.transmission` uses its numpy implementation (same numbers,
about nine times slower).
"""

import os
import tempfile

from setuptools import Extension, setup
from setuptools.command.build_ext import build_ext

# gcc/clang: no errno from libm (lets sqrt and libm calls vectorise); tan stays a separate
# call (gcc would otherwise fold it into scalar builtins)
UNIX_FLAGS = ["-O3", "-fno-math-errno", "-fopenmp-simd", "-fno-builtin-tan"]
#: libmvec entry points the SIMD build calls (x86-64 glibc >= 2.35 has them all)
VECTOR_MATH = ("_ZGVbN2v_exp", "_ZGVbN2v_log", "_ZGVbN2v_tan")


class BuildKernel(build_ext):
    def build_extensions(self):
        unix = self.compiler.compiler_type == "unix"
        for ext in self.extensions:
            ext.extra_compile_args = UNIX_FLAGS if unix else ["/O2"]
            if unix and _links(self, VECTOR_MATH, ["mvec", "m"]):
                ext.define_macros = [("WW_HAVE_LIBMVEC", "1")]
                ext.libraries = ["mvec", "m"]
        super().build_extensions()


def _links(cmd: build_ext, symbols: tuple[str, ...], libraries: list[str]) -> bool:
    """Whether a program calling ``symbols`` links against ``libraries`` here."""
    source = "".join(f"extern void {s}(void);\n" for s in symbols)
    source += (
        "int main(void) {\n" + "".join(f"    {s}();\n" for s in symbols) + "    return 0;\n}\n"
    )
    with tempfile.TemporaryDirectory() as tmp:
        path = os.path.join(tmp, "probe.c")
        with open(path, "w") as f:
            f.write(source)
        try:
            objects = cmd.compiler.compile([path], output_dir=tmp)
            cmd.compiler.link_executable(objects, "probe", output_dir=tmp, libraries=libraries)
        except Exception:  # noqa: BLE001 - any failure means: build without it
            return False
    return True


setup(
    ext_modules=[
        Extension("wellwright.physics._slices", sources=["physics/_slices.c"], optional=True)
    ],
    cmdclass={"build_ext": BuildKernel},
)
