"""The Python package (clients/python, installed with `pip install ./clients/python`) against
the release server: every RPC called through it with numpy input, checked against closed forms
and published values; a bad request raises the typed error carrying the field path; a block
stream gives the same answer as one request."""
import math

import numpy as np
import pytest


from jetloop_client import Calibration, Client, InvalidRequest, PhysicsRefused  # noqa: E402

FS = 51_200.0


def tone(f, seconds=1.0, rms_pa=1.0, channels=1, fs=FS):
    t = np.arange(int(seconds * fs)) / fs
    x = math.sqrt(2) * rms_pa * np.sin(2 * np.pi * f * t)
    return np.stack([x] * channels, axis=1) if channels > 1 else x


@pytest.fixture(scope="module")
def client(server_address):
    with Client(server_address, timeout_s=60) as c:
        yield c


def test_gas_dynamics_and_info(client):
    assert client.server_info().server_version
    assert client.health() is True
    services = client.services()
    for name in ("jetloop.v1.SpectrumService", "jetloop.v1.StagingService", "grpc.health.v1.Health"):
        assert name in services, services
    # NACA Report 1135, Table I, M = 2: p/p0 0.12780.
    assert client.isentropic(mach_number=2.0).pressure_ratio == pytest.approx(0.12780, rel=5e-5)
    # NACA Report 1135, Table II, M1 = 2: M2 0.57735.
    assert client.normal_shock(2.0).downstream_mach_number == pytest.approx(0.57735, rel=5e-5)
    # Mj = sqrt(5 (NPR^(2/7) - 1)) (NACA Report 1135, eq. 44), by NPR and by gauge pressure.
    mj = math.sqrt(5 * (4 ** (2 / 7) - 1))
    assert client.jet_state(0.0254, nozzle_pressure_ratio=4.0).fully_expanded_mach_number == pytest.approx(mj, rel=1e-9)
    s = client.jet_state(0.0254, gauge_pressure_pa=3 * 101_325.0, ambient_pressure_pa=101_325.0)
    assert s.fully_expanded_mach_number == pytest.approx(mj, rel=1e-9)


def test_cells_and_screech(client):
    # Prandtl-Pack spacing pi sqrt(Mj^2 - 1) Dj / 2.404826 (Pack 1950).
    r = client.cell_spacing(fully_expanded_mach_number=1.5, fully_expanded_diameter_m=0.02)
    assert r.modes[0].spacing_m == pytest.approx(math.pi * math.sqrt(1.25) * 0.02 / 2.404825557695773, rel=1e-9)
    # Powell (1953) with Uc = 0.7 Uj, cold jet at 288.15 K: 5426.32 Hz (closed form, see
    # tests/data/cells-and-screech.toml).
    p = client.predict_screech(fully_expanded_mach_number=1.5, fully_expanded_diameter_m=0.02)
    assert p.predictions[0].fundamental_hz == pytest.approx(5426.320906706898, rel=1e-9)
    n = client.predict_shock_noise([90.0, 120.0], fully_expanded_mach_number=1.5, fully_expanded_diameter_m=0.02)
    assert len(n.peaks) >= 2
    sweep = client.sweep_screech(np.linspace(1.5, 5.0, 15), diameter_m=0.0254, nozzle_pressure_ratio=3.0)
    assert sweep["powell_hz"].shape == (15,) and np.isnan(sweep["powell_hz"][0])  # NPR 1.5 is subsonic
    assert np.all(np.diff(sweep["powell_hz"][~np.isnan(sweep["powell_hz"])]) < 0)  # falls as NPR rises
    assert len(client.guided_modes(fully_expanded_mach_number=1.3, fully_expanded_diameter_m=0.02).modes) > 0


def test_spectra_and_stream(client):
    x = tone(2000.0, channels=2)
    one = client.extract_tones(x, FS, Calibration.pascals(), segment_length=8192)
    # 1 Pa rms = 93.98 dB re 20 uPa (closed form).
    for ch in one.channels:
        top = max(ch.tones, key=lambda t: t.level_db)
        assert top.frequency_hz == pytest.approx(2000.0, abs=0.1)
        assert top.level_db == pytest.approx(93.979, abs=0.05)
    blocks = (x[i:i + 5000] for i in range(0, len(x), 5000))
    streamed = client.extract_tones_stream(blocks, FS, 2, Calibration.pascals(), segment_length=8192)
    for a, b in zip(one.channels, streamed.channels):
        assert [t.frequency_hz for t in a.tones] == pytest.approx([t.frequency_hz for t in b.tones], rel=1e-12)
        assert [t.level_db for t in a.tones] == pytest.approx([t.level_db for t in b.tones], rel=1e-12)
    bands = client.band_levels(tone(1000.0), FS, Calibration.microphone(0.004, 0.004))
    b1k = [b for b in bands.channels[0].bands.bands if b.nominal_hz == 1000.0][0]
    assert b1k.level_db == pytest.approx(93.979, abs=0.05)
    # Opposite phase on two microphones at 0 and 180 degrees: antisymmetric.
    pair = np.stack([tone(3000.0), -tone(3000.0)], axis=1) + 0.01 * np.random.default_rng(1).standard_normal((int(FS), 2))
    cross = client.cross_spectra(pair, FS, Calibration.pascals(), azimuths_deg=[0.0, 180.0], segment_length=8192)
    assert cross.tones, cross


def test_ramp_track_and_stages(client):
    fs, secs = 25_600.0, 4.0
    t = np.arange(int(fs * secs)) / fs
    npr = 2.5 + 0.5 * t / secs
    mic = np.sqrt(2) * np.sin(2 * np.pi * 4000.0 * t)
    r = client.analyse_ramp(np.stack([mic, npr], axis=1), fs, Calibration.pascals(), control_channel=1,
                            control="npr", control_per_unit=1.0, frame_duration_s=0.25)
    assert r["frequency_hz"] == pytest.approx(np.full(16, 4000.0), abs=2.0)
    assert r["npr"] == pytest.approx(2.5 + 0.5 * (np.arange(16) + 0.5) / 16, abs=1e-3)
    updates = list(client.track_tones((mic[i:i + 2560, None] for i in range(0, len(mic), 2560)), fs, 1,
                                      Calibration.pascals(), update_interval_s=0.5, window_s=0.5))
    assert updates and any(u.channels and u.channels[0].tones for u in updates)
    # Reflector lines f = n / (tau0 + 2 d / a), n = 3 then 4 (the reflector loop; common practice).
    a = math.sqrt(1.4 * 287.05 * 288.15)
    d = np.arange(0.0, 0.03, 0.001)
    n = np.where(d <= 0.015, 3.0, 4.0)
    f = n / (6e-4 + 2 * d / a)
    fit = client.fit_stages(d, f, control="reflector")
    assert [s.loop_order for s in fit.stages] == [3, 4]


def test_typed_errors_carry_the_field_path(client):
    with pytest.raises(InvalidRequest) as e:
        client.jet_state(-1.0, nozzle_pressure_ratio=0.5)
    fields = [v.field for v in e.value.violations]
    assert "conditions.nozzle.round_convergent.exit_diameter_m" in fields
    with pytest.raises(PhysicsRefused) as e:
        client.cell_spacing(diameter_m=0.0254, nozzle_pressure_ratio=1.2)
    assert e.value.kind == "JET_NOT_SUPERSONIC"
