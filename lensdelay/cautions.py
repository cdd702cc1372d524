"""The caution every result carries: forecasts and H0 are model-dependent."""

__all__ = ["CAUTION"]


#: Printed with every forecast and H0 result, and written into their files.
CAUTION = (
    "Caution: delays and dates are model-dependent. Line-of-sight structure and the "
    "mass-sheet degeneracy rescale every delay by (1 - kappa_ext); microlensing by stars "
    "in the lens changes image brightness and can shift light-curve features."
)
