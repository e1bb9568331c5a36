"""Column names and flag codes of the frames that travel between engine modules.

A reading travels: file -> ``readings`` (parsed, mapped, validated, flagged; columns of
:data:`READING_COLUMNS`, SI units) -> ``analysis`` (adds :data:`DERIVED_COLUMNS`) -> ``store``
-> pages -> ``report``. Column names live here and nowhere else.
"""

from __future__ import annotations

# --- Readings, as parsed from a file (SI units) ---------------------------------------------
ROW = "row"  #: 1-based row number of the reading in its source file (data rows, header excluded)
MACHINE = "machine"  #: machine id (str)
SESSION = "session"  #: session name (str, "" when none)
TIME = "time"  #: timestamp (pandas datetime64; NaT when unknown)
ELAPSED_S = "elapsed_s"  #: seconds since the first reading of the file (float; NaN if unknown)
SPEED_REV_S = "speed_rev_s"  #: rotation rate [rev/s]; NaN where the speed was linear
BELT_SPEED_M_S = "belt_speed_m_s"  #: linear belt speed [m/s]; NaN where it was a rotation rate
CURRENT_A = "current_a"  #: measured current [A]
RH = "rh"  #: relative humidity as a fraction [-]
TEMPERATURE_K = "temperature_k"  #: air temperature [K]
PRESSURE_PA = "pressure_pa"  #: air pressure [Pa]
VOLTAGE_V = "voltage_v"  #: terminal voltage [V], optional
NOTE = "note"  #: free text (str)
FLAGS = "flags"  #: semicolon-separated flag codes, "" when the reading is clean

READING_COLUMNS = (
    ROW, MACHINE, SESSION, TIME, ELAPSED_S, SPEED_REV_S, BELT_SPEED_M_S, CURRENT_A, RH,
    TEMPERATURE_K, PRESSURE_PA, VOLTAGE_V, NOTE, FLAGS,
)

# --- Environment log, as parsed (SI units) ---------------------------------------------------
ENVIRONMENT_COLUMNS = (ROW, TIME, ELAPSED_S, RH, TEMPERATURE_K, PRESSURE_PA)

# --- Derived per reading by analysis (SI units) ----------------------------------------------
CEILING_A = "ceiling_a"  #: ceiling current [A]
EFFICIENCY = "efficiency"  #: measured / ceiling current [-]
EFFICIENCY_U = "efficiency_u"  #: 1-sigma uncertainty of the efficiency [-]
CHARGE_PER_REV_C = "charge_per_rev_c"  #: current / rev/s [C]
SURFACE_DENSITY_C_M2 = "surface_density_c_m2"  #: achieved surface charge density [C/m^2]
RELATIVE_AIR_DENSITY = "relative_air_density"  #: delta [-]
ABS_HUMIDITY_KG_M3 = "abs_humidity_kg_m3"  #: absolute humidity [kg/m^3]
DEW_POINT_K = "dew_point_k"  #: dew point [K]

DERIVED_COLUMNS = (
    CEILING_A, EFFICIENCY, EFFICIENCY_U, CHARGE_PER_REV_C, SURFACE_DENSITY_C_M2,
    RELATIVE_AIR_DENSITY, ABS_HUMIDITY_KG_M3, DEW_POINT_K,
)

# --- Flag codes: what can be wrong with a reading ----------------------------------------------
FLAG_CODES: dict[str, str] = {
    "not_a_number": "a value that should be a number is text",
    "unit_mismatch": "the unit written in the cell does not fit the column (mA in a speed column)",
    "missing_value": "speed or current is empty",
    "negative": "speed is negative, or current is clearly below zero (beyond the meter's "
                "tolerance)",
    "zero_speed": "speed is zero: no charge is carried",
    "unknown_machine": "the machine is not in the machines list",
    "rh_out_of_range": "relative humidity outside 0 to 100 %",
    "temperature_out_of_range": "air temperature outside -40 to 60 degC",
    "pressure_out_of_range": "air pressure outside 50 to 110 kPa",
    "no_environment": "no humidity log entry within the time tolerance",
    "above_ceiling": "efficiency above 100 % by more than twice its uncertainty: almost always "
                     "a unit or geometry error",
    "duplicate_time": "another reading of the same machine has the same time and values",
    "bad_time": "the time could not be read",
    "speed_kind": "the speed's kind does not suit the machine (m/s for a disc)",
}


#: Each flag in a few plain words, for tables where the full meaning does not fit.
FLAG_WORDS: dict[str, str] = {
    "not_a_number": "text where a number belongs",
    "unit_mismatch": "unit does not fit the column",
    "missing_value": "value missing",
    "negative": "negative value",
    "zero_speed": "speed zero",
    "unknown_machine": "machine not described",
    "rh_out_of_range": "humidity out of range",
    "temperature_out_of_range": "temperature out of range",
    "pressure_out_of_range": "pressure out of range",
    "no_environment": "no humidity log entry near it",
    "above_ceiling": "above the ceiling",
    "duplicate_time": "written twice",
    "bad_time": "time unreadable",
    "speed_kind": "wrong kind of speed",
}


def flags_in_words(flags):
    """Flag codes ("code;code") in plain words ("value missing; written twice"), for display.

    Parameters
    ----------
    flags : pandas.Series of str
        Flags as stored.

    Returns
    -------
    pandas.Series of str
        The same index; "" where a reading has no flag. Each distinct flags text is put into
        words once.
    """
    distinct = {text: "; ".join(FLAG_WORDS.get(code, code) for code in str(text).split(";")
                                if code)
                for text in flags.unique()}
    return flags.map(distinct)
