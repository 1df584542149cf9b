"""Physical constants used throughout cluttersim (SI units)."""

#: Speed of light in vacuum, exact by the SI definition of the metre (BIPM, SI Brochure, 9th ed., 2019).
SPEED_OF_LIGHT_M_S = 299_792_458.0

#: Boltzmann constant, exact by the SI definition of the kelvin (BIPM, SI Brochure, 9th ed., 2019; CODATA 2018).
BOLTZMANN_J_K = 1.380649e-23
