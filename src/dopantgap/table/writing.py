"""Writing a table (or any output frame) as CSV that reads back bit for bit."""

from dopantgap.atomic import atomic_path

__all__ = ["write_table"]


def write_table(frame, path):
    """Write a table as UTF-8 CSV with ``\\n`` line ends, atomically.

    Columns whose names start with ``_`` (``_file``, ``_line``) are left out. Floats are
    written in their shortest exact form, so reading the file back gives the same numbers
    bit for bit.

    Parameters
    ----------
    frame : pandas.DataFrame
        Table to write; it is not changed.
    path : str or Path
        Target file; its folder is created if needed. An interrupted write leaves any
        earlier file at ``path`` untouched.
    """
    kept = [name for name in frame.columns if not str(name).startswith("_")]
    with atomic_path(path) as temporary:
        frame.loc[:, kept].to_csv(
            temporary, index=False, encoding="utf-8", lineterminator="\n"
        )
