"""Accuracy assessment and sample-based area estimation of maps, and agreement of fractions with references.

Kernels on plain arrays (no xarray, no paths). Import the names from here
(``from unmix.accuracy import stratified_area``).

================  ===================================================================================
module            holds
================  ===================================================================================
``area``          :func:`stratified_area` (error-adjusted areas, user's / producer's / overall accuracy
                  with confidence intervals), :func:`error_matrix_proportions`, :func:`check_counts`
``sampling``      :func:`sample_size` (Olofsson et al. 2014, eq. 13), :func:`allocate`,
                  :func:`stratified_sample`
``fractions``     :func:`fraction_agreement` (MAE, RMSE, bias, R^2 per endmember)
================  ===================================================================================
"""

from __future__ import annotations

from .area import check_counts, error_matrix_proportions, stratified_area
from .fractions import fraction_agreement
from .sampling import DEFAULT_MIN_PER_CLASS, allocate, sample_size, stratified_sample

__all__ = ["check_counts", "error_matrix_proportions", "stratified_area", "fraction_agreement",
           "DEFAULT_MIN_PER_CLASS", "sample_size", "allocate", "stratified_sample"]
