"""The window autoencoder.

Importing this package never imports torch: it re-exports only the
numpy-side pieces (the integer decoder that archives store, the sizing rule
and the progress/report records).  Training (numpy, reproducible bit for bit
through :mod:`tsarchive.model.exact`) lives in :mod:`tsarchive.model.train`;
the torch int64 decoder in :mod:`tsarchive.model.torch_infer` is a second,
independent path the tests compare with.
"""

from tsarchive.model.intnet import FRAC_BITS, MODEL_ID, IntDecoder, IntLayer, quantize_decoder
from tsarchive.model.spec import TrainProgress, TrainReport, choose_hidden, decoder_params

__all__ = ["FRAC_BITS", "MODEL_ID", "IntDecoder", "IntLayer", "quantize_decoder", "TrainProgress",
           "TrainReport", "choose_hidden", "decoder_params"]
