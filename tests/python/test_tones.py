"""Cross-checks of ShockCellService and ToneService against independent Python evaluations:
Bessel zeros from scipy.special.jn_zeros (SciPy), the Tam, Seiner & Yu (1986) formula and the
shock-noise peak formula written out here from the published expressions, with the jet state
from pygasflow."""
import math

import pytest
from pygasflow import isentropic_solver
from scipy.special import jn_zeros

REL = 1e-12


@pytest.fixture(scope="module")
def stubs(pb, channel):
    import importlib

    cells = importlib.import_module("jetloop.v1.shock_cells_pb2")
    cells_grpc = importlib.import_module("jetloop.v1.shock_cells_pb2_grpc")
    tones = importlib.import_module("jetloop.v1.tones_pb2")
    tones_grpc = importlib.import_module("jetloop.v1.tones_pb2_grpc")
    return cells, cells_grpc.ShockCellServiceStub(channel), tones, tones_grpc.ToneServiceStub(channel)


def direct(cells, mj, d, t0=288.15):
    return cells.JetInput(
        fully_expanded=cells.FullyExpandedJet(fully_expanded_mach_number=mj, fully_expanded_diameter_m=d, total_temperature_k=t0)
    )


def test_bessel_zeros_match_scipy_jn_zeros(stubs):
    cells, stub, _, _ = stubs
    r = stub.CellSpacing(cells.CellSpacingRequest(jet=direct(cells, 1.5, 0.02), options=cells.CellOptions(modes=20)))
    zeros = jn_zeros(0, 20)
    assert len(r.modes) == 20
    for m, z in zip(r.modes, zeros):
        assert abs(m.bessel_zero - z) < 1e-13 * z, (m.mode, m.bessel_zero, z)
        ls = math.pi * math.sqrt(1.5**2 - 1) * 0.02 / z
        assert math.isclose(m.vortex_sheet_spacing_m, ls, rel_tol=REL)
    # Pack's constant pi / j0,1 (Pack 1950), quoted as 1.306.
    assert abs(math.pi / zeros[0] - 1.306) < 5e-4


@pytest.mark.parametrize("npr,t0", [(2.5, 288.15), (3.5, 288.15), (5.0, 288.15), (3.0, 500.0), (4.5, 800.0)])
def test_tam_seiner_yu_1986_formula(pb, stubs, npr, t0):
    """f Dj/Uj = 0.67 (Mj^2-1)^-1/2 [1 + 0.7 Mj (1 + (g-1)/2 Mj^2)^-1/2 (T0/Ta)^1/2]^-1
    (Tam, Seiner & Yu 1986, J. Sound Vib. 110), evaluated here with Mj, Dj, Uj from pygasflow."""
    cells, _, tones, stub = stubs
    common = pb.common
    cond = common.JetConditions(
        nozzle=common.Nozzle(round_convergent=common.RoundConvergentNozzle(exit_diameter_m=0.0254)),
        operating_point=common.OperatingPoint(nozzle_pressure_ratio=npr, total_temperature_k=t0, ambient_temperature_k=288.15),
    )
    r = stub.PredictScreech(tones.PredictScreechRequest(jet=cells.JetInput(conditions=cond)))
    tam = next(p for p in r.predictions if p.model.startswith("Tam"))
    g = 1.4
    mj = float(isentropic_solver("pressure", [1.0 / npr], gamma=g, to_dict=True)["m"])
    dj = 0.0254 * math.sqrt(float(isentropic_solver("m", [mj], to_dict=True)["ars"]))
    tj = t0 / (1 + 0.2 * mj**2)
    uj = mj * math.sqrt(g * 287.05 * tj)
    st = 0.67 / math.sqrt(mj**2 - 1) / (1 + 0.7 * mj * (1 + 0.2 * mj**2) ** -0.5 * math.sqrt(t0 / 288.15))
    assert math.isclose(tam.strouhal_number, st, rel_tol=1e-9)
    assert math.isclose(tam.fundamental_hz, st * uj / dj, rel_tol=1e-9)


def test_shock_noise_peaks_against_the_formula(stubs):
    """f_p = Uc / (Ls (1 - Mc cos psi)) (Harper-Bourne & Fisher 1973; Tam & Tanna 1982)."""
    cells, _, tones, stub = stubs
    angles = [30.0, 60.0, 90.0, 120.0, 150.0, 180.0]
    r = stub.PredictShockNoise(
        tones.PredictShockNoiseRequest(
            jet=direct(cells, 1.6, 0.03),
            convection=tones.Convection(convection_ratio=0.65),
            cells=cells.CellOptions(modes=2, spacing_factor=0.9),
            observer_angles_deg=angles,
        )
    )
    tj = 288.15 / (1 + 0.2 * 1.6**2)
    uj = 1.6 * math.sqrt(1.4 * 287.05 * tj)
    a = math.sqrt(1.4 * 287.05 * 288.15)
    uc = 0.65 * uj
    zeros = jn_zeros(0, 2)
    for p in r.peaks:
        ls = 0.9 * math.pi * math.sqrt(1.6**2 - 1) * 0.03 / zeros[p.mode - 1]
        d = 1 - uc / a * math.cos(math.radians(p.observer_angle_deg))
        if d > 0:
            assert math.isclose(p.peak_frequency_hz, uc / (ls * d), rel_tol=1e-12)
        else:
            assert not p.HasField("peak_frequency_hz")


@pytest.mark.parametrize(
    "gamma,r_gas,t0",
    [(5.0 / 3.0, 2077.1, 288.15), (1.3, 287.05, 700.0), (1.4, 287.05, 288.15)],
)
def test_powell_uses_the_ambient_air_sound_speed_for_any_jet_gas(pb, stubs, gamma, r_gas, t0):
    """Powell's fundamental f = Uc / (Ls (1 + Uc/a)) with Uc = 0.7 Uj and a the sound speed of
    the surrounding dry air (1.4, 287.05 J/(kg K), 288.15 K), whatever the jet gas (helium,
    gamma 1.3 combustion-like products, air); Mj and Aj/A* of the jet gas from pygasflow,
    Prandtl-Pack spacing with j0,1 from scipy.special.jn_zeros."""
    cells, _, tones, stub = stubs
    common = pb.common
    cond = common.JetConditions(
        nozzle=common.Nozzle(round_convergent=common.RoundConvergentNozzle(exit_diameter_m=0.0254)),
        operating_point=common.OperatingPoint(nozzle_pressure_ratio=4.0, total_temperature_k=t0, ambient_temperature_k=288.15),
        gas=common.Gas(gamma=gamma, gas_constant_j_per_kg_k=r_gas),
    )
    r = stub.PredictScreech(tones.PredictScreechRequest(jet=cells.JetInput(conditions=cond)))
    mj = float(isentropic_solver("pressure", [1.0 / 4.0], gamma=gamma, to_dict=True)["m"])
    dj = 0.0254 * math.sqrt(float(isentropic_solver("m", [mj], gamma=gamma, to_dict=True)["ars"]))
    tj = t0 * float(isentropic_solver("m", [mj], gamma=gamma, to_dict=True)["tr"])
    uj = mj * math.sqrt(gamma * r_gas * tj)
    a = math.sqrt(1.4 * 287.05 * 288.15)
    ls = math.pi * math.sqrt(mj**2 - 1) * dj / jn_zeros(0, 1)[0]
    uc = 0.7 * uj
    powell = next(p for p in r.predictions if p.model.startswith("Powell"))
    assert math.isclose(powell.fundamental_hz, uc / (ls * (1 + uc / a)), rel_tol=1e-9)
    assert math.isclose(r.jet.ambient_sound_speed_m_per_s, a, rel_tol=1e-12)


def test_shock_noise_peak_beyond_strouhal_10_is_unset_and_flagged(stubs):
    """Near 1 - Mc cos psi -> 0 the formula's peak runs off to huge Strouhal numbers: the server
    leaves those unset with beyond_strouhal_limit (limit 10, stated in the proto)."""
    cells, _, tones, stub = stubs
    tj = 288.15 / (1 + 0.2 * 1.6**2)
    uj = 1.6 * math.sqrt(1.4 * 287.05 * tj)
    a = math.sqrt(1.4 * 287.05 * 288.15)
    angles = [0.0, 5.0, 10.0, 20.0, 40.0, 90.0]
    r = stub.PredictShockNoise(
        tones.PredictShockNoiseRequest(
            jet=direct(cells, 1.6, 0.03),
            convection=tones.Convection(convection_speed_m_per_s=0.995 * a),
            observer_angles_deg=angles,
        )
    )
    ls = math.pi * math.sqrt(1.6**2 - 1) * 0.03 / jn_zeros(0, 1)[0]
    for p in r.peaks:
        f = 0.995 * a / (ls * (1 - 0.995 * math.cos(math.radians(p.observer_angle_deg))))
        st = f * 0.03 / uj
        if st > 10:
            assert p.beyond_strouhal_limit and not p.HasField("peak_frequency_hz"), p
        else:
            assert not p.beyond_strouhal_limit and math.isclose(p.peak_frequency_hz, f, rel_tol=1e-12), p
    assert any(p.beyond_strouhal_limit for p in r.peaks) and not all(p.beyond_strouhal_limit for p in r.peaks)
