import pytest

from balltraj.errors import InputError
from balltraj.physics.air import (air_conditions, air_viscosity, moist_air_density, reynolds_number,
                                  saturation_vapour_pressure, standard_pressure_at_altitude)


def test_cipm2007_check_values():
    # Source: Picard et al. 2008 (CIPM-2007), values computed in docs/references.md section 5.5
    assert moist_air_density(20, 101325, 50) == pytest.approx(1.199314, abs=2e-6)
    assert moist_air_density(30, 89876.29, 50) == pytest.approx(1.023880, abs=2e-6)
    assert moist_air_density(15, 101325, 0) == pytest.approx(1.225521, abs=2e-6)


@pytest.mark.parametrize("t,p,rh", [(15, 101325, 0), (20, 101325, 50), (30, 101325, 50), (30, 89876.29, 50),
                                    (5, 95000, 80), (25, 84000, 20)])
def test_density_against_coolprop_and_psychrolib(t, p, rh):
    # Source: CoolProp HAPropsSI (real-gas humid air) and PsychroLib (ASHRAE 2017 ch. 1 eq. 11)
    from CoolProp.HumidAirProp import HAPropsSI
    import psychrolib

    psychrolib.SetUnitSystem(psychrolib.SI)
    ours = moist_air_density(t, p, rh)
    coolprop = 1.0 / HAPropsSI("Vha", "T", t + 273.15, "P", p, "R", rh / 100)
    w = psychrolib.GetHumRatioFromRelHum(t, rh / 100, p)
    psy = psychrolib.GetMoistAirDensity(t, w, p)
    assert ours == pytest.approx(coolprop, rel=1e-3)
    assert ours == pytest.approx(psy, rel=1e-3)


def test_saturation_pressure_against_coolprop():
    # Source: CoolProp PropsSI saturated water (IAPWS-95); docs/references.md 5.3: 2339.16 Pa at 20 degC
    from CoolProp.CoolProp import PropsSI

    for t in (20.0, 30.0):
        assert saturation_vapour_pressure(t + 273.15) == pytest.approx(PropsSI("P", "T", t + 273.15, "Q", 0, "Water"),
                                                                      rel=2e-4)


@pytest.mark.parametrize("h", [0.0, 500.0, 1000.0, 1609.344, 3000.0])
def test_standard_pressure_against_ambiance_and_fluids(h):
    # Source: ISO 2533 / USSA-1976 via ambiance.Atmosphere and fluids.atmosphere.ATMOSPHERE_1976
    import ambiance
    from fluids.atmosphere import ATMOSPHERE_1976

    ours = standard_pressure_at_altitude(h)
    assert ours == pytest.approx(float(ambiance.Atmosphere(h).pressure[0]), rel=2e-5)
    assert ours == pytest.approx(ATMOSPHERE_1976(h).P, rel=5e-4)  # fluids takes geometric altitude


def test_isa_sea_level_density():
    # Source: ISO 2533 sea level rho0 = 1.225 kg/m^3 (docs/references.md 10.1); CIPM sits +0.04 % above
    # the ideal-gas ISA value at 15 degC dry
    assert moist_air_density(15, 101325, 0) == pytest.approx(1.225, rel=6e-4)


def test_sutherland_viscosity():
    # Source: USSA-1976 Sutherland form, fluids ATMOSPHERE_1976.viscosity; 1.81341e-5 at 20 degC
    from fluids.atmosphere import ATMOSPHERE_1976

    assert air_viscosity(293.15) == pytest.approx(1.81341e-5, rel=1e-5)
    for T in (250.0, 273.15, 288.15, 310.0):
        assert air_viscosity(T) == pytest.approx(ATMOSPHERE_1976.viscosity(T), rel=1e-9)


def test_reynolds_against_fluids():
    # Source: fluids.core.Reynolds; docs/references.md 2.4 baseball 40 m/s -> Re 1.96e5 at nu 1.5054e-5
    from fluids.core import Reynolds

    rho, mu = 1.204557, 1.81341e-5
    assert reynolds_number(40, 0.0738, rho, mu) == pytest.approx(Reynolds(V=40, D=0.0738, rho=rho, mu=mu))
    assert reynolds_number(40, 0.0738, rho, mu) == pytest.approx(1.96e5, rel=3e-3)


def test_air_conditions_defaults_are_stated():
    a = air_conditions()
    assert "default" in a.source and a.density == pytest.approx(1.199314, abs=2e-6)
    b = air_conditions(altitude_m=1000, temperature_c=30, humidity_pct=50)
    assert b.density == pytest.approx(1.02388, abs=5e-5)


@pytest.mark.parametrize("kw", [dict(humidity_pct=120), dict(humidity_pct=-1), dict(density=-1.0),
                                dict(density=float("nan")), dict(temperature_c=float("inf"))])
def test_bad_air(kw):
    with pytest.raises(InputError):
        air_conditions(**kw)
