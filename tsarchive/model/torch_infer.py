"""The integer decoder run with torch int64 tensors (a second, independent path).

:func:`predict_torch` performs exactly the arithmetic of
:meth:`tsarchive.model.intnet.IntDecoder.predict` -- int64 matmul, bias,
arithmetic shift, ReLU -- on CPU torch tensors.  Integer matmul has no
rounding, so the result equals the numpy path bit for bit on any thread count.
Used on the packing side (torch is already loaded there) and in tests.
"""

from __future__ import annotations

import numpy as np
import torch

from tsarchive.model.intnet import IntDecoder

_CHUNK_ELEMS = 1 << 21


def predict_torch(dec: IntDecoder, codes: np.ndarray) -> np.ndarray:
    """Decode ``codes`` (N, K) to int64 fixed-point windows (N, W) with torch int64 arithmetic."""
    c = torch.from_numpy(np.ascontiguousarray(dec._check_codes(codes)))
    weights = [torch.from_numpy(l.weight.astype(np.int64)) for l in dec.layers]
    biases = [torch.from_numpy(l.bias) for l in dec.layers]
    out = torch.empty((c.shape[0], dec.window), dtype=torch.int64)
    rows = max(1, _CHUNK_ELEMS // max(dec.sizes))
    last = len(dec.layers) - 1
    with torch.no_grad():
        for a in range(0, c.shape[0], rows):
            h = c[a:a + rows]
            for i, layer in enumerate(dec.layers):
                acc = torch.matmul(h, weights[i]) + biases[i]
                s = int(layer.shift)
                h = torch.bitwise_right_shift(acc, s) if s >= 0 else torch.bitwise_left_shift(acc, -s)
                if i < last:
                    h = torch.clamp_min(h, 0)
            out[a:a + rows] = h
    return out.numpy()
