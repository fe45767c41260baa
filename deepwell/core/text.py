"""Small helpers for the English of generated text (messages, reports)."""

__all__ = ["plural"]


def plural(n, word, many=None):
    """``n`` and ``word`` in the right number: ``1 star``, ``3 stars``, ``0 stars``.

    Parameters
    ----------
    n : int
        The count.
    word : str
        Singular form.
    many : str, optional
        Plural form when it is not ``word + "s"`` (e.g. ``"data sets"``).

    Returns
    -------
    str
    """
    return f"{n} {word if n == 1 else (many or word + 's')}"
