"""Cross-check of GasDynamicsService against pygasflow (PyPI), an independent implementation of
the same perfect-gas relations (NACA Report 1135), over a grid of Mach numbers and gammas.
Tolerance: relative error <= 1e-9 on every ratio."""
import math

import grpc
import numpy as np
import pytest
from pygasflow import isentropic_solver, shockwave_solver

REL = 1e-9
GAMMAS = [1.1, 1.2, 1.3, 1.4, 5.0 / 3.0]
MACHS = [0.05, 0.1, 0.3, 0.5, 0.8, 0.95, 1.0, 1.05, 1.2, 1.5, 2.0, 2.5, 3.0, 4.0, 6.0, 10.0]


def close(a, b, rel=REL):
    return math.isclose(a, b, rel_tol=rel, abs_tol=0.0)


@pytest.fixture(scope="module")
def gas(pb, channel):
    return pb.gas_grpc.GasDynamicsServiceStub(channel)


@pytest.mark.parametrize("g", GAMMAS)
def test_isentropic_from_mach_matches_pygasflow(pb, gas, g):
    for m in MACHS:
        r = gas.IsentropicRatios(pb.gas.IsentropicRatiosRequest(gamma=g, mach_number=m))
        ref = isentropic_solver("m", [m], gamma=g, to_dict=True)
        assert close(r.pressure_ratio, float(ref["pr"])), (g, m)
        assert close(r.temperature_ratio, float(ref["tr"])), (g, m)
        assert close(r.density_ratio, float(ref["dr"])), (g, m)
        assert close(r.area_ratio, float(ref["ars"])), (g, m)
        assert close(r.critical_velocity_ratio, float(ref["urs"])), (g, m)
        if m >= 1.0:
            assert close(r.mach_angle_deg, float(ref["ma"])), (g, m)
            assert close(r.prandtl_meyer_angle_deg, float(ref["pm"])), (g, m)
        else:
            assert not r.HasField("prandtl_meyer_angle_deg")


@pytest.mark.parametrize("g", GAMMAS)
def test_mach_from_each_ratio_matches_pygasflow(pb, gas, g):
    for m in [0.2, 0.5, 0.8, 1.3, 2.0, 3.5]:
        ref = isentropic_solver("m", [m], gamma=g, to_dict=True)
        branch = pb.gas.MACH_BRANCH_SUBSONIC if m < 1 else pb.gas.MACH_BRANCH_SUPERSONIC
        asks = {
            "pressure_ratio": ("pressure", float(ref["pr"])),
            "temperature_ratio": ("temperature", float(ref["tr"])),
            "density_ratio": ("density", float(ref["dr"])),
            "area_ratio": ("crit_area_sub" if m < 1 else "crit_area_super", float(ref["ars"])),
        }
        if m > 1:
            asks["prandtl_meyer_angle_deg"] = ("prandtl_meyer", float(ref["pm"]))
            asks["mach_angle_deg"] = ("mach_angle", float(ref["ma"]))
        for field, (key, value) in asks.items():
            r = gas.IsentropicRatios(pb.gas.IsentropicRatiosRequest(gamma=g, branch=branch, **{field: value}))
            back = float(isentropic_solver(key, [value], gamma=g, to_dict=True)["m"])
            assert close(r.mach_number, back, 1e-9), (g, m, field, r.mach_number, back)


@pytest.mark.parametrize("g", GAMMAS)
def test_normal_shock_matches_pygasflow(pb, gas, g):
    for m1 in [1.0, 1.1, 1.5, 2.0, 3.0, 5.0, 10.0]:
        r = gas.NormalShock(pb.gas.NormalShockRequest(gamma=g, upstream_mach_number=m1))
        ref = shockwave_solver("mu", [m1], gamma=g, to_dict=True)
        assert close(r.downstream_mach_number, float(ref["md"])), (g, m1)
        assert close(r.static_pressure_ratio, float(ref["pr"])), (g, m1)
        assert close(r.density_ratio, float(ref["dr"])), (g, m1)
        assert close(r.static_temperature_ratio, float(ref["tr"])), (g, m1)
        assert close(r.total_pressure_ratio, float(ref["tpr"])), (g, m1)


def test_jet_state_mach_and_diameter_against_pygasflow(pb, gas):
    """Mj from the NPR is the Mach number whose p/p0 is 1/NPR (pygasflow, inverse isentropic);
    Dj/D = sqrt((A/A*)(Mj) / (A/A*)(Md)) (Tam & Tanna 1982) with A/A* from pygasflow."""
    common = pb.common
    for npr in [2.0, 3.0, 4.0, 5.5, 8.0]:
        for md in [1.0, 1.5, 2.0]:
            if md == 1.0:
                noz = common.Nozzle(round_convergent=common.RoundConvergentNozzle(exit_diameter_m=0.02))
            else:
                noz = common.Nozzle(
                    round_convergent_divergent=common.RoundConvergentDivergentNozzle(
                        exit_diameter_m=0.02, design_mach_number=md
                    )
                )
            cond = common.JetConditions(
                nozzle=noz, operating_point=common.OperatingPoint(nozzle_pressure_ratio=npr, total_temperature_k=300.0)
            )
            s = gas.JetState(pb.gas.JetStateRequest(conditions=cond)).state
            mj = float(isentropic_solver("pressure", [1.0 / npr], gamma=1.4, to_dict=True)["m"])
            assert close(s.fully_expanded_mach_number, mj), (npr, md)
            if s.supersonic:
                a_j = float(isentropic_solver("m", [mj], to_dict=True)["ars"])
                a_d = float(isentropic_solver("m", [md], to_dict=True)["ars"])
                assert close(s.fully_expanded_diameter_m, 0.02 * np.sqrt(a_j / a_d)), (npr, md)
            # Tj = T0 (T/T0)(Mj), Uj = Mj sqrt(g R Tj)
            tj = 300.0 * float(isentropic_solver("m", [mj], to_dict=True)["tr"])
            assert close(s.fully_expanded_temperature_k, tj)
            assert close(s.fully_expanded_velocity_m_per_s, mj * math.sqrt(1.4 * 287.05 * tj))


def test_bad_input_is_invalid_argument_naming_the_field(pb, gas):
    with pytest.raises(grpc.RpcError) as e:
        gas.IsentropicRatios(pb.gas.IsentropicRatiosRequest(gamma=0.9, mach_number=2.0))
    assert e.value.code() == grpc.StatusCode.INVALID_ARGUMENT
    assert "gamma" in e.value.details()


def test_reflection_v1alpha_lists_the_services(channel):
    """Python's grpcio-reflection client speaks grpc.reflection.v1alpha."""
    from grpc_reflection.v1alpha.proto_reflection_descriptor_database import ProtoReflectionDescriptorDatabase

    db = ProtoReflectionDescriptorDatabase(channel)
    services = db.get_services()
    assert "jetloop.v1.GasDynamicsService" in services
    assert "jetloop.v1.InfoService" in services


def test_health_serving(channel):
    from grpc_health.v1 import health_pb2, health_pb2_grpc

    stub = health_pb2_grpc.HealthStub(channel)
    r = stub.Check(health_pb2.HealthCheckRequest(service="jetloop.v1.GasDynamicsService"))
    assert r.status == health_pb2.HealthCheckResponse.SERVING


def _lip_shock_excess_deg(md, npr, g=1.4):
    """Deflection of the lip shock of an over-expanded jet minus the largest deflection a
    reflected shock behind it can give (von Neumann detachment criterion; Hornung 1986), with
    pygasflow's oblique-shock functions. Positive: regular reflection impossible (Mach disk)."""
    from pygasflow.shockwave import (
        get_upstream_normal_mach_from_ratio,
        max_theta_from_mach,
        oblique_mach_downstream,
        theta_from_mach_beta,
    )

    pr = float(isentropic_solver("m", [md], gamma=g, to_dict=True)["pr"])
    m1n = float(get_upstream_normal_mach_from_ratio("pressure", 1.0 / (npr * pr), g))
    beta = math.degrees(math.asin(m1n / md))
    theta = float(theta_from_mach_beta(md, beta, g))
    m2 = float(oblique_mach_downstream(md, beta, theta, g))
    if m2 <= 1.0:
        return theta
    return theta - float(max_theta_from_mach(m2, g))


@pytest.mark.parametrize("md", [1.5, 2.0, 2.5, 3.0])
def test_over_expanded_mach_disk_flag_matches_the_detachment_criterion(pb, gas, md):
    common = pb.common
    pr = float(isentropic_solver("m", [md], gamma=1.4, to_dict=True)["pr"])
    design = 1.0 / pr
    exit_shock = design / float(shockwave_solver("mu", [md], gamma=1.4, to_dict=True)["pr"])
    checked = 0
    for k in range(1, 60):
        npr = exit_shock + (design - exit_shock) * k / 60.0
        excess = _lip_shock_excess_deg(md, npr)
        if abs(excess) < 0.05:  # within 0.05 deg of the switch: too close to call
            continue
        cond = common.JetConditions(
            nozzle=common.Nozzle(
                round_convergent_divergent=common.RoundConvergentDivergentNozzle(exit_diameter_m=0.05, design_mach_number=md)
            ),
            operating_point=common.OperatingPoint(nozzle_pressure_ratio=npr),
        )
        s = gas.JetState(pb.gas.JetStateRequest(conditions=cond)).state
        if s.regime != pb.gas.EXPANSION_REGIME_OVER_EXPANDED:
            continue
        assert s.mach_disk_expected == (excess > 0), (md, npr, excess)
        checked += 1
    assert checked > 40


def test_fully_expanded_values_are_unset_where_shocks_stand_in_the_way(pb, gas):
    """Md 1.5 at NPR 1.6 (supersonic exit, Mj < 1) and Md 3 at NPR 2.5 (shock in the nozzle):
    the isentropic Mach number equals pygasflow's inverse of p/p0 = 1/NPR, the fully expanded
    fields are absent."""
    common = pb.common
    for md, npr in [(1.5, 1.6), (3.0, 2.5)]:
        cond = common.JetConditions(
            nozzle=common.Nozzle(
                round_convergent_divergent=common.RoundConvergentDivergentNozzle(exit_diameter_m=0.05, design_mach_number=md)
            ),
            operating_point=common.OperatingPoint(nozzle_pressure_ratio=npr),
        )
        s = gas.JetState(pb.gas.JetStateRequest(conditions=cond)).state
        mj = float(isentropic_solver("pressure", [1.0 / npr], gamma=1.4, to_dict=True)["m"])
        assert close(s.isentropic_mach_number, mj)
        for f in ["fully_expanded_mach_number", "fully_expanded_diameter_m", "fully_expanded_to_exit_area_ratio",
                  "fully_expanded_velocity_m_per_s", "acoustic_mach_number"]:
            assert not s.HasField(f), (md, npr, f)
        assert not s.supersonic
