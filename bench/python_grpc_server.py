#!/usr/bin/env python3
"""A minimal Python gRPC server (grpcio, asyncio) answering the same unary call as jetloop:
`jetloop.v1.GasDynamicsService/IsentropicRatios` from a Mach number, with the isentropic
perfect-gas relations (NACA Report 1135 eqs. 43-45, 80; closed forms) and no validation
beyond what the formulas need. For `bench/capacity.py` only: it stands for the script a lab
would otherwise run itself.

Usage: python3 bench/python_grpc_server.py [ADDR]   (default 127.0.0.1:0; prints the address)
Needs the Python package of this repository (pip install ./clients/python) for the messages.
"""
import asyncio
import math
import sys

import grpc
from jetloop.v1 import gas_dynamics_pb2 as g, gas_dynamics_pb2_grpc as gg


class Ratios(gg.GasDynamicsServiceServicer):
    async def IsentropicRatios(self, request, context):
        gamma = request.gamma if request.HasField("gamma") else 1.4
        m = request.mach_number
        t = 1.0 / (1.0 + 0.5 * (gamma - 1.0) * m * m)
        p = t ** (gamma / (gamma - 1.0))
        rho = t ** (1.0 / (gamma - 1.0))
        area = (1.0 / m) * ((2.0 / (gamma + 1.0)) / t) ** ((gamma + 1.0) / (2.0 * (gamma - 1.0))) if m > 0 else math.inf
        return g.IsentropicRatiosResponse(gamma=gamma, mach_number=m, temperature_ratio=t, pressure_ratio=p,
                                          density_ratio=rho, area_ratio=area)


async def main():
    addr = sys.argv[1] if len(sys.argv) > 1 else "127.0.0.1:0"
    server = grpc.aio.server()
    gg.add_GasDynamicsServiceServicer_to_server(Ratios(), server)
    port = server.add_insecure_port(addr)
    await server.start()
    print(f"listening on {addr.rsplit(':', 1)[0]}:{port}", flush=True)
    await server.wait_for_termination()


if __name__ == "__main__":
    asyncio.run(main())
