"""Warning and error classes of imgcut."""

__all__ = [
    "ImgcutWarning",
    "EigenConvergenceWarning",
    "GraphTooLargeError",
    "ImageReadError",
    "ImageTooLargeError",
    "OutputExistsError",
    "OutputFolderError",
]


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


class ImageReadError(ValueError):
    """An image file could not be read: empty, not an image, corrupt, NaN/inf samples, or a
    plane/channel selection that does not fit it. The message is one line naming the file."""


class ImageTooLargeError(ImageReadError):
    """An image has more pixels than the reader's ``max_pixels`` limit (a decompression-bomb
    guard); checked from the header before any pixel is decoded."""


class OutputExistsError(FileExistsError):
    """Output files of a run already exist and overwriting was not requested; the message names
    the first existing file."""


class OutputFolderError(OSError):
    """The output folder is not a folder, cannot be created, or is not writable; the message
    is one line naming the folder."""
