"""Constants the config checks need before any instrument module is imported (those modules
import radio-beam, spectral-cube and scipy, a second or more)."""

#: allowed FWHM / (lambda / D): uniform illumination (1.02) to very strong taper
FWHM_FACTOR_RANGE = (1.0, 1.5)
