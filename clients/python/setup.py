"""Build hook: generate the Python gRPC stubs of proto/jetloop/v1 into the build (as the
package `jetloop.v1`, the import path the generated modules use among themselves)."""
import pathlib

from setuptools import setup
from setuptools.command.build_py import build_py

HERE = pathlib.Path(__file__).resolve().parent
PROTO = HERE.parent.parent / "proto"


class BuildWithStubs(build_py):
    def run(self):
        super().run()
        from grpc_tools import protoc

        out = pathlib.Path(self.build_lib)
        protos = sorted(str(p.relative_to(PROTO)) for p in (PROTO / "jetloop" / "v1").glob("*.proto"))
        if not protos:
            raise RuntimeError(f"no .proto files under {PROTO}: build from a jetloop checkout")
        include = pathlib.Path(protoc.__file__).parent / "_proto"
        rc = protoc.main(["protoc", f"-I{PROTO}", f"-I{include}", f"--python_out={out}", f"--grpc_python_out={out}", *protos])
        if rc != 0:
            raise RuntimeError(f"grpc_tools.protoc failed with {rc}")
        for d in (out / "jetloop", out / "jetloop" / "v1"):
            (d / "__init__.py").touch()


# The generated `jetloop/v1` modules land in build_lib, and the wheel takes build_lib whole.
setup(cmdclass={"build_py": BuildWithStubs})
