"""Warning and error classes of imgcut."""

__all__ = ["ImgcutWarning", "EigenConvergenceWarning", "GraphTooLargeError"]


class ImgcutWarning(UserWarning):
    """Base class of every warning imgcut emits."""


class EigenConvergenceWarning(ImgcutWarning):
    """An eigensolver stopped with residuals above the requested tolerance.

    The eigenvectors are still returned; advice on what to change is in the message.
    """


class GraphTooLargeError(MemoryError, ValueError):
    """The affinity graph would exceed the memory budget.

    Raised before anything large is allocated; the message suggests the multiscale
    path or a smaller radius.
    """
