"""Torch-free descriptions of autoencoder training: sizing rule and reports.

Kept apart from :mod:`tsarchive.model.train` so that callers which only
display training progress (or size a model) never import torch.
"""

from __future__ import annotations

from dataclasses import dataclass

from tsarchive.errors import BadInput

#: Share of the archive's samples that the stored decoder may cost in weights.
DECODER_BUDGET = 0.05
#: Upper limit on the decoder's hidden width (training time grows with it).
HIDDEN_CAP = 256


def decoder_params(code_size: int, hidden: int, window: int) -> int:
    """Parameter count of the stored decoder ``K -> hidden -> W`` (weights + biases)."""
    return code_size * hidden + hidden + hidden * window + window


def choose_hidden(n_windows: int, window: int, code_size: int, *,
                  budget: float = DECODER_BUDGET, cap: int = HIDDEN_CAP) -> int:
    """Hidden width of the decoder for a data set of ``n_windows`` x ``window`` samples.

    Rule: the largest ``H`` whose decoder costs at most ``budget`` (5 %) of the
    ``n_windows * window`` samples it describes, i.e.
    ``K*H + H + H*W + W <= budget*N*W``, then clamped to ``[max(K, 4), cap]``.
    The floor can exceed the budget on very short recordings; callers compare
    the coded size with and without the autoencoder anyway.
    """
    if n_windows < 1 or window < 1 or code_size < 1:
        raise BadInput(f"cannot size a decoder for {n_windows} windows of {window} samples with code size "
                       f"{code_size}; all three must be positive")
    allowed = budget * n_windows * window - window
    h = int(allowed // (window + code_size + 1)) if allowed > 0 else 0
    return int(min(cap, max(max(code_size, 4), h)))


@dataclass(frozen=True)
class TrainProgress:
    """One training epoch finished (sent to the ``progress`` callback)."""

    epoch: int          # 1-based index of the finished epoch
    epochs: int         # the most epochs this run may take (max_epochs)
    loss: float         # mean training loss (MSE on normalised windows) of the epoch
    val_loss: float     # loss on the held-out split, codes rounded as when stored
    elapsed_s: float    # wall-clock seconds since training started (shown, never used)


@dataclass(frozen=True)
class TrainReport:
    """How a training run went (attached to the trained model)."""

    epochs_run: int
    stopped_by: str        # "converged" | "work" (budget spent) | "max_epochs" | "diverged"
    best_epoch: int
    train_loss: float
    val_loss: float        # best held-out loss (the weights kept are from that epoch)
    n_train: int
    n_val: int
    hidden: int
    elapsed_s: float

    def to_dict(self) -> dict:
        return {"epochs_run": self.epochs_run, "stopped_by": self.stopped_by, "best_epoch": self.best_epoch,
                "train_loss": self.train_loss, "val_loss": self.val_loss, "n_train": self.n_train,
                "n_val": self.n_val, "hidden": self.hidden, "elapsed_s": self.elapsed_s}

    @classmethod
    def from_dict(cls, d: dict) -> "TrainReport":
        return cls(epochs_run=int(d["epochs_run"]), stopped_by=str(d["stopped_by"]),
                   best_epoch=int(d["best_epoch"]), train_loss=float(d["train_loss"]),
                   val_loss=float(d["val_loss"]), n_train=int(d["n_train"]), n_val=int(d["n_val"]),
                   hidden=int(d["hidden"]), elapsed_s=float(d["elapsed_s"]))
