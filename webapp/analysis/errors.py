"""The one error type the analysis layer raises for bad input or impossible requests."""


class OrdinateError(ValueError):
    """A problem with the user's data or settings, worded for a lab user.

    ``str(error)`` is a complete sentence that says what is wrong and, where
    possible, what to do about it. The user interface and the command line show
    it as it is; they never show a traceback.
    """

    def __init__(self, message: str):
        super().__init__(message)
        self.message = message

    def __str__(self) -> str:
        return self.message
