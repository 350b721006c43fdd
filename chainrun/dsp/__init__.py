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
* :func:`sosfilt` (kernel.py): the ONE adapter to scipy's compiled sosfilt kernel, loaded
  without running scipy.signal's package import, with scipy.signal.sosfilt as its fallback.

scipy.signal itself is still imported for raw ``iir`` sections (tf2sos), by the meters that use
it, by the plots, and by the fallback.
"""
from .butter import butter_sos
from .response import freqz_sos, minimize_bounded, point_response
from .kernel import sosfilt

__all__ = ["butter_sos", "freqz_sos", "minimize_bounded", "point_response", "sosfilt"]
