"""compquant: quantitative LIBS / spark-OES composition analysis for lab samples.

The flow is one-directional::

    run -> preprocess -> lines -> calibrate | cflibs -> quantify -> report

Each step is a plain function or small estimator over numpy arrays and pandas
tables; the command line (``compquant ...``) is a thin shell over this API.
"""

from compquant.errors import CompquantError

__version__ = "0.1.0"

__all__ = ["CompquantError", "__version__"]
