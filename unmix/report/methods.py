"""The report's words: what each label means, the methods in plain language, the references, and the
parameters of the run as a readable table (instead of the raw provenance JSON)."""

from __future__ import annotations

import json

import pandas as pd
import xarray as xr

__all__ = ["LABEL_MEANINGS", "METHODS", "REFERENCES", "parameters_table"]

#: Plain-word meaning of every trajectory label.
LABEL_MEANINGS = {
    "stable": "no trend and no abrupt change that stands out from the year-to-year noise after the "
              "multiple-testing control",
    "gradual_increase": "the fraction rises steadily (significant Mann-Kendall trend after FDR control, and the "
                        "Sen slope is at least the minimum slope per year): slow modification",
    "gradual_decrease": "the fraction falls steadily (as above, with a negative slope): slow modification",
    "abrupt_increase": "one step up at a date (significant Pettitt change point after FDR control, a step fits "
                       "better than a line, and the step is at least the minimum step): conversion",
    "abrupt_decrease": "one step down at a date (as above): conversion, e.g. clearing",
    "insufficient_data": "too few valid dates to test (clouds, dates left out); left out of every share",
}

#: Sections of the methods in plain words: (heading, paragraph).
METHODS = [
    ("Cover fractions",
     "Each pixel of each date is modelled as a mixture of a few pure materials (endmembers) whose spectra are "
     "known. Fully constrained least squares finds the fractions that best reproduce the pixel's reflectance "
     "while staying between 0 and 1 and adding up to 1 (Heinz and Chang 2001). The root mean square residual "
     "(RMSE) says how well the mixture fits: a high RMSE marks pixels the chosen endmembers do not describe."),
    ("Comparable dates",
     "Before unmixing, every date is checked against a reference date: its sub-pixel shift by upsampled phase "
     "correlation (Guizar-Sicairos et al. 2008; a fifth of a pixel is the usual tolerance after Townshend et "
     "al. 1992), its radiometric gain and offset on pseudo-invariant pixels chosen by IR-MAD (Nielsen 2007; "
     "Canty and Nielsen 2008), and its day of year against the season window. Dates that fail are left out or "
     "corrected as chosen; the ledger lists every date and why."),
    ("Trends and abrupt changes",
     "For each pixel and endmember, the Mann-Kendall test asks whether the fraction tends to rise or fall over "
     "the years (Mann 1945; Kendall 1975), with a correction for serial correlation; the Theil-Sen slope "
     "(Sen 1968) says how fast, in fraction per year, with its 95 % interval. The Pettitt test (1979) looks for "
     "one abrupt step; a step is preferred when it fits better than a straight line (BIC)."),
    ("Testing millions of pixels at once",
     "At a 5 % level one pixel in twenty would show a 'significant' trend by chance alone. The false discovery "
     "rate control of Benjamini and Hochberg (1995) adjusts the p-values over the whole map (q-values) so that, "
     "among the pixels called significant, the expected share of false calls stays below the chosen q. Slope "
     "maps show non-significant pixels in pale grey."),
    ("Areas",
     "Map areas are pixel counts times the ground area of each pixel (exact ellipsoidal areas for a geographic "
     "grid). A pixel count of a map class is a biased area estimate: where a reference sample is interpreted, "
     "the error-adjusted areas with 95 % confidence intervals (Olofsson et al. 2014) are the ones to report."),
]

#: The references cited in the report.
REFERENCES = [
    "Benjamini, Y. and Hochberg, Y. (1995). Controlling the false discovery rate. J. R. Stat. Soc. B 57, 289-300.",
    "Canty, M. J. and Nielsen, A. A. (2008). Automatic radiometric normalization of multitemporal satellite "
    "imagery with the iteratively re-weighted MAD transformation. Remote Sens. Environ. 112, 1025-1036. "
    "doi:10.1016/j.rse.2007.07.013",
    "Guizar-Sicairos, M., Thurman, S. T. and Fienup, J. R. (2008). Efficient subpixel image registration "
    "algorithms. Opt. Lett. 33, 156-158. doi:10.1364/OL.33.000156",
    "Heinz, D. C. and Chang, C.-I. (2001). Fully constrained least squares linear spectral mixture analysis. "
    "IEEE Trans. Geosci. Remote Sens. 39, 529-545.",
    "Kendall, M. G. (1975). Rank Correlation Methods. Griffin, London.",
    "Mann, H. B. (1945). Nonparametric tests against trend. Econometrica 13, 245-259.",
    "Nielsen, A. A. (2007). The regularized iteratively reweighted MAD method for change detection in multi- "
    "and hyperspectral data. IEEE Trans. Image Process. 16, 463-478. doi:10.1109/TIP.2006.888195",
    "Olofsson, P., Foody, G. M., Herold, M., Stehman, S. V., Woodcock, C. E. and Wulder, M. A. (2014). Good "
    "practices for estimating area and assessing accuracy of land change. Remote Sens. Environ. 148, 42-57. "
    "doi:10.1016/j.rse.2014.02.015",
    "Pettitt, A. N. (1979). A non-parametric approach to the change-point problem. Appl. Stat. 28, 126-135.",
    "Sen, P. K. (1968). Estimates of the regression coefficient based on Kendall's tau. J. Am. Stat. Assoc. 63, "
    "1379-1389.",
    "Townshend, J. R. G., Justice, C. O., Gurney, C. and McManus, J. (1992). The impact of misregistration on "
    "change detection. IEEE Trans. Geosci. Remote Sens. 30, 1054-1060. doi:10.1109/36.175340",
]


def _value_text(value) -> str:
    if isinstance(value, float):
        return f"{value:g}"
    if isinstance(value, (list, tuple)):
        return ", ".join(_value_text(v) for v in value) if value else "–"
    if isinstance(value, dict):
        return "; ".join(f"{k}: {_value_text(v)}" for k, v in value.items()) if value else "–"
    return "–" if value is None else str(value)


def parameters_table(products: dict[str, xr.Dataset | None]) -> pd.DataFrame:
    """The parameters each product was made with, one row per (step, parameter), values in words.

    Parameters
    ----------
    products : dict
        Step name (e.g. "fractions", "trends") -> product Dataset (its ``parameters`` attribute, JSON, and its
        ``command`` and ``unmix_version``) or None.
    """
    rows = []
    for step, ds in products.items():
        if ds is None:
            continue
        try:
            params = json.loads(ds.attrs.get("parameters", "{}"))
        except (TypeError, ValueError):
            params = {}
        for key, value in params.items():
            rows.append({"Step": step, "Parameter": key.replace("_", " "), "Value": _value_text(value)})
        for key in ("unmix_version", "command", "plan_sha256"):
            if key in ds.attrs:
                rows.append({"Step": step, "Parameter": key.replace("_", " "), "Value": str(ds.attrs[key])})
    return pd.DataFrame(rows, columns=["Step", "Parameter", "Value"])
