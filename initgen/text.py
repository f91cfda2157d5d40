"""Plain-text formatting shared by every floor: how a number appears in a message or a table."""


def number(x) -> str:
    """A number as a message shows it: ``float`` with the ``g`` format (``0.5``, ``1e+06``)."""
    return f"{float(x):g}"


def value_or_dash(v, spec: str = ".4g") -> str:
    """A table cell: ``v`` formatted with ``spec``, or ``-`` when there is no value (None)."""
    return "-" if v is None else format(v, spec)
