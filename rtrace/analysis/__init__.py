"""Analysis of traced and observed images: spectra, spectral indices, optical-depth turnover."""

from .spectra import (
                      DEFAULT_PEAK_FRACTION,
                      DEFAULT_SNR_THRESHOLD,
                      FREQUENCY_TOLERANCE,
                      SED_COLUMNS,
                      THIN_SPECTRAL_INDEX,
                      SpectralIndexMap,
                      aperture_mask,
                      describe_background,
                      frequency_index,
                      middle_frequency_index,
                      pixel_flux,
                      sed,
                      sed_metadata,
                      sed_table,
                      spectral_index,
                      spectral_index_map,
                      tau_unity_frequency,
                      write_sed_table,
)

__all__ = ["sed", "sed_metadata", "describe_background", "sed_table", "write_sed_table", "spectral_index",
           "spectral_index_map", "tau_unity_frequency", "frequency_index", "pixel_flux", "aperture_mask",
           "FREQUENCY_TOLERANCE",
           "THIN_SPECTRAL_INDEX", "SED_COLUMNS", "SpectralIndexMap", "middle_frequency_index",
           "DEFAULT_PEAK_FRACTION", "DEFAULT_SNR_THRESHOLD"]
