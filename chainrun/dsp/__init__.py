"""Signal-processing routines the everyday path needs, without importing scipy.signal.

Importing scipy.signal costs about 0.6 s and 75 MB before a sample is read (benchmarks/RESULTS.md).
What ``chainrun check`` and ``chainrun run`` need from it for a recipe without raw ``iir``
sections is small, so it is here:

* :func:`butter_sos` (butter.py): scipy.signal.butter's low- and high-pass Butterworth designs
  as second-order sections, ported operation for operation with numpy (prototype poles, prewarp,
  bilinear transform, the ``nearest`` pole-zero pairing of zpk2sos), so the rows are scipy's to
  the last bit and the filtered audio stays byte-identical;
* :func:`freqz_sos` and :func:`minimize_bounded` (response.py): the guard's frequency response
  (scipy.signal.freqz_sos at given frequencies) and its bounded scalar minimiser
  (scipy.optimize.minimize_scalar, ``method="bounded"``), ported the same way;
* :func:`sosfilt` and :func:`lfilter` (kernel.py): the ONE adapter to scipy's compiled filter
  loops (sosfilt for the chain, lfilter's for the loudness meter's K-weighting), loaded without
  running scipy.signal's package import, with scipy.signal's public functions as the fallback;
* :func:`kaiser_lowpass` (fir.py): scipy.signal.firwin's Kaiser-window low-pass, the true-peak
  meter's interpolator, to the last bit.

scipy.signal itself is still imported for raw ``iir`` sections (tf2sos), by the plots, and by the
fallbacks.
"""
from .butter import butter_sos
from .response import freqz_sos, minimize_bounded, point_response, unique_sorted
from .fir import kaiser_lowpass
from .kernel import lfilter, sosfilt

__all__ = ["butter_sos", "freqz_sos", "kaiser_lowpass", "lfilter", "minimize_bounded", "point_response", "sosfilt",
           "unique_sorted"]
