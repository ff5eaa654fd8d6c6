"""Sliding correlation of one trace with several short templates, sharing its FFT blocks.

The beat detector correlates the same component with up to four templates (two
template refinements, the final template and its core). Overlap-save needs the
spectrum of each block of the trace; these are computed once here and reused for
every template, so each further template costs one product and one inverse transform
per block. The wavelet stage applies its band filter the same way (one template).
"""

from __future__ import annotations

import numpy as np
import scipy.fft
from numpy.typing import NDArray

from features._numeric import windows

#: Smallest FFT length of a block; a few times the longest template keeps the overlap small.
_MIN_FFT = 1024


class BlockSpectra:
    """Spectra of the overlapping blocks of ``x`` for templates up to ``max_len`` samples.

    Overlap-save: the trace, zero-extended by ``max_len`` samples before it and enough
    after it, is cut into blocks of ``nfft`` samples that advance by
    ``nfft - max_len + 1``; within a block, the circular correlation with a template of
    at most ``max_len`` samples is free of wrap-around at the first ``step`` lags.
    """

    def __init__(self, x: NDArray[np.float64], max_len: int) -> None:
        n = x.size
        self.n = n
        self.lead = max_len
        self.nfft = scipy.fft.next_fast_len(max(_MIN_FFT, 8 * max_len), real=True)
        self.step = self.nfft - max_len + 1
        frames = -(-(n + max_len) // self.step)
        ext = np.zeros((frames - 1) * self.step + self.nfft)
        ext[max_len: max_len + n] = x
        view = windows(ext, self.nfft, self.step)
        self.spectra = scipy.fft.rfft(view, axis=-1)

    def correlate(self, template: NDArray[np.float64], centre: int) -> NDArray[np.float64]:
        """``sum_k template[k] x[i - centre + k]`` at every sample ``i`` (x zero outside).

        Index ``i`` describes the template placed with its sample ``centre`` on sample
        ``i`` of ``x``; the same numbers, to rounding, as the ``"full"`` convolution of
        ``x`` with the reversed template, cut to ``x``'s length at that alignment.
        """
        m = template.size
        if m > self.lead or not 0 <= centre < m:
            raise ValueError(f"template of {m} samples with centre {centre} does not fit "
                             f"blocks made for at most {self.lead}")
        kernel = np.conj(scipy.fft.rfft(template, self.nfft))
        lags = scipy.fft.irfft(self.spectra * kernel, self.nfft, axis=-1)[:, : self.step]
        start = self.lead - centre
        return np.ascontiguousarray(lags.reshape(-1)[start: start + self.n])
