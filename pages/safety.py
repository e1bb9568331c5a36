"""Safety and method: the cautions, how to measure, the model, its references and its limits."""

import pandas as pd
import streamlit as st

from engine.sparks import DISCHARGE_ADVICE, threshold_table
from pages import _shared as shared

st.title("Safety and method")

st.header("High voltage can hurt people")
st.markdown(shared.SAFETY_MARKDOWN)

st.header("Measuring safely and well")
st.markdown(
    """
- **Current.** Put a microammeter in series with the discharge path (terminal to terminal, or
  terminal to ground), protected by a series resistor and a spark gap or gas-discharge
  protector across the meter. The short-circuit current comes closest to the ceiling; at high
  terminal voltage, leakage and corona take their share.
- **Speed.** Use an optical tachometer on a reflective mark on the carrier or its shaft; never
  reach towards a running machine. For a belt, read the roller or the belt's surface speed and
  say which in the unit (`rpm` on a roller, `m/s` for the belt).
- **Humidity and temperature.** Place a logger next to the machine at carrier height, its clock
  set to the same time as the meter's log, so the two can be matched by time.
"""
)

st.header("The model")
st.markdown("An insulating carrier can hold at most the surface charge density at which the "
            "field next to it reaches the breakdown field of air. With the field on one side of "
            "the surface (Gauss's law):")
st.latex(r"\sigma_{limit} = \varepsilon_0 \, E_{breakdown}, \qquad "
         r"E_{breakdown} = E_{ref}\,\delta, \qquad "
         r"\delta = \frac{p}{101.3\ \mathrm{kPa}} \cdot \frac{293.15\ \mathrm{K}}{T}")
st.markdown("The ceiling current is that density times the charged area swept past the "
            "collectors per second:")
st.latex(r"I_{ceiling} = \sigma_{limit} \cdot A_{rev} \cdot f \cdot \mathrm{units}")
st.markdown(
    """
| symbol | meaning |
| --- | --- |
| A_rev | charged area per revolution of one carrier: a disc's annulus π (r_out² − r_in²) times the sector fill; a belt's width times π d_roller or the loop length (σ w v for a belt speed); a cylinder's lateral surface 2 π r L; or an area you give |
| f | revolutions per second (revolutions, never radians) |
| units | how many one-carrier ceilings the machine can deliver: for a disc machine from its arrangement (table below); for belts, cylinders and custom carriers N × k, the carriers that deliver charge times the charge loads per revolution of each |
| E_ref | breakdown field at the reference atmosphere, 3.0 MV/m by default |

**Units: how the trade counts disc machines** (common practice, no published source). One unit
is the ceiling of one disc's charged annulus, σ_limit · A_rev · f.

| arrangement | units |
| --- | --- |
| one disc turning past a fixed inductor plate | 1 |
| twin-disc with sectors | 1 in total: the two sides never have equal capacitance, so one disc delivers and the other acts as a moving inductor |
| the same with split collectors (each collector's halves angled toward the nearest neutraliser) | 2 |
| sectorless twin-disc | 2 |
| sectorless twin-disc with split collectors | 4 |
| close-spaced stack of sectorless discs with split collectors | 2 per outer disc, 4 per inner disc: n discs give 4n − 4 (8 discs: 28) |

Where the trade gives no rule (one disc with split collectors, a stack with fixed collectors or
with sectors) the count is derived by the same reasoning (split collectors double, sectors
halve) and marked "by analogy, no source"; you may give the units yourself instead.

**Efficiency** is the measured current over the ceiling. **Charge per revolution** is the
current over the speed; the **observed units** are the fitted charge per revolution over
σ_limit · A_rev, what one unit carries per revolution: a machine "delivers 5.6 of the 28 units
its arrangement allows". Humidity does not enter the ceiling (water vapour hardly changes the
breakdown of air, and raises it slightly); its effect on output, through a conducting film on
the insulating surfaces, is measured from the readings (efficiency against relative humidity,
with a logistic decline where the data span the drop). Below 0 °C humidity is taken over
supercooled water, the meteorological convention. Vapour pressure, dew point and absolute
humidity use the Magnus form:
"""
)
st.latex(r"e_s(t) = 6.1094\ \mathrm{hPa}\; \exp\left(\frac{17.625\,t}{t + 243.04}\right),"
         r"\quad t \text{ in } {}^{\circ}\mathrm{C}")

st.header("References")
st.markdown(
    """
- CODATA 2018 recommended values: vacuum permittivity 8.8541878128e-12 F/m.
- IEC 60060-1:2010, High-voltage test techniques, Part 1: standard reference atmosphere
  (20 degC, 101.3 kPa, 11 g/m³ absolute humidity) and the air density correction, here with
  exponent 1 (the breakdown field proportional to the relative air density).
- ICAO Doc 7488/3, Manual of the ICAO Standard Atmosphere (pressure from altitude).
- O. A. Alduchov and R. E. Eskridge, Improved Magnus form approximation of saturation vapor
  pressure, J. Appl. Meteor. 35 (1996) 601-609.
- Breakdown field of air, about 3 MV/m in uniform fields over centimetre gaps: handbook value.
  Over millimetre gaps air holds more (about 4.6 MV/m at 1 mm, 20 °C, 101.3 kPa, by the
  empirical uniform-field relation of the high-voltage textbooks).
- Units of disc machines by arrangement: the trade's rules, common practice, no published
  source.
"""
)

st.header("Limits of the model")
st.markdown(
    """
- The limit density assumes the field on one side of a charged sheet facing a conductor; a
  carrier with charge on both faces or collected twice per turn delivers more units than one,
  which the arrangement (or the units you give) accounts for.
- The breakdown field depends on the gap and the electrode shape; 3 MV/m holds for uniform fields
  over centimetre gaps, and higher fields hold over millimetre gaps, so a carrier close to a
  conductor can carry more than the flat ceiling (a machine may give its air gap: see the
  voltage side below). Sharp edges break down earlier, so real
  carriers stay below the ceiling.
- Scaling with air density is the IEC 60060-1 correction with exponent 1 (the breakdown field
  proportional to the relative air density), good at ground-level pressures; it is not meant
  for vacuum or pressurised machines.
- Humidity's effect is measured, not modelled: a steep drop above roughly 60-70 % RH is common
  practice, with no published source.
- Tolerances in the machines file are taken as one standard uncertainty; efficiency uncertainty
  is first-order propagation of geometry, speed, meter and breakdown-field uncertainty.
"""
)

st.header("The voltage side")
st.subheader("Stored energy: when a discharge is dangerous")
st.markdown("Terminals and Leyden jars store W = ½ C V². The levels below are those the tool "
            "warns about (the Planner computes the energy of yours):")
st.dataframe(pd.DataFrame(threshold_table()), hide_index=True, key="safety-thresholds")
st.warning(DISCHARGE_ADVICE)
st.subheader("Breakdown voltage of a gap")
st.markdown(
    """
- **Uniform fields** (plates, or balls much larger than the gap): the empirical relation for
  air of the high-voltage textbooks, U = 24.36 (p d) + 6.72 √(p d) kV with p in bar at 20 °C
  and d in cm (about 4.6 kV for 1 mm, 31 kV for 1 cm). It depends on p d, that is on the air's
  density times the gap, so the tool uses p = 1.013 bar · δ. Used for gaps of 0.1 mm to 10 cm
  at reference density.
- **Two equal balls, one earthed**: the field-utilisation method. The largest field on the live
  ball follows from Kelvin's image charges; the gap breaks down when it reaches the larger of
  Peek's gradient for spheres, 27.2 δ (1 + 0.54 / √(δ r)) kV/cm, and the uniform-field
  gradient of the same gap. Balls of 2 cm to 2 m, gaps up to half the diameter; within about
  5 % of the standard sphere-gap table up to 0.3 D and about 10 % low at 0.5 D.
- **Outside both** (a 20 cm spark between 2 cm balls) the tool gives no number: such sparks
  depend on corona and polarity.
- **Air gap of a carrier.** A machine may give `air_gap`, the distance from the carrier to the
  nearest conductor; its breakdown field is then the uniform-field field U / d at that gap and
  the air density instead of the flat 3 MV/m. Millimetre gaps hold more (about 4.6 MV/m at
  1 mm), which explains machines that seem to exceed the flat ceiling.
"""
)
st.subheader("Load line")
st.markdown(
    """
Where readings carry the terminal voltage, the tool fits per machine and session, by least
squares, I = q_rev f + I_0 − V / R_leak (speed as a second term when it varies). It reports the
short-circuit current at the session's median speed, the leakage resistance, the open-circuit
voltage I_sc R_leak (95 % interval by Fieller's method for a ratio), and the largest output power
I_sc V_oc / 4 (interval by first-order propagation). A quadratic term in V tested at the 5 %
level flags curvature (corona above some voltage); voltages spanning less than a fifth of the
largest give a note instead of numbers; a current that does not fall with voltage has no finite
open-circuit voltage, and the tool says so.
"""
)
st.subheader("References for the voltage side")
st.markdown(
    """
- E. Kuffel, W. S. Zaengl and J. Kuffel, High Voltage Engineering: Fundamentals, 2nd ed.,
  Newnes, 2000, section 5.8: the uniform-field relation for air (coefficients from memory).
- F. W. Peek, Dielectric Phenomena in High Voltage Engineering, 3rd ed., McGraw-Hill, 1929:
  breakdown gradient at spheres (from memory).
- IEC 60052:2002, Voltage measurement by means of standard air gaps: the sphere-gap table used
  to check the sphere method (values from memory).
- J. C. Maxwell, A Treatise on Electricity and Magnetism, 1891, chapter XI: electrical images.
- IEC 61010-1, Safety requirements for electrical equipment for measurement, control and
  laboratory use: limits of stored charge and energy (from memory).
- E. C. Fieller, Some problems in interval estimation, J. R. Stat. Soc. B 16 (1954) 175-185.
"""
)
