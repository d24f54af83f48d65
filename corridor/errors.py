"""Exception family of corridor.

Every error a user can cause is one of these; the CLI turns them into a clear
message and exit code 2. Anything else is an internal error (exit code 3).
"""


class CorridorError(Exception):
    """Base class for errors caused by the user's config or input."""


class ConfigError(CorridorError, ValueError):
    """The run configuration is invalid.

    Parameters
    ----------
    problems : list of str
        Every problem found, each naming the file and key.
    """

    def __init__(self, problems):
        if isinstance(problems, str):
            problems = [problems]
        self.problems = list(problems)
        super().__init__("\n".join(self.problems))


class InputError(CorridorError, ValueError):
    """An input layer cannot be used.

    Parameters
    ----------
    problems : list of str
        Every problem found, each naming the layer, feature id and field.
    """

    def __init__(self, problems):
        if isinstance(problems, str):
            problems = [problems]
        self.problems = list(problems)
        super().__init__("\n".join(self.problems))
