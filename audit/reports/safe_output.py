"""One output rule for every file lti-audit writes, and plain text for every renderer.

Files (used by ``compare -o``, ``convert -o``, ``check --junit/--markdown/--json``,
``stress --out`` and ``promote``):

* no command overwrites an existing file unless the user passed an explicit flag
  (``overwrite=True``); a model file or manifest of the run is never overwritten;
* nothing is written through a symbolic link (the target path itself must not be a
  link), and nothing is written into a folder that does not exist unless the caller
  asks for it to be created;
* a written file appears atomically: the text goes to a temporary file in the target
  folder, is flushed to disk, and then takes its name (``os.link``, which fails if the
  name exists, when not overwriting; ``os.replace`` otherwise), so a reader never sees
  a partial file and a concurrent writer is never clobbered;
* paths read from files (manifests, counterexamples) are resolved and must stay inside
  their folder (:func:`path_inside`).

Text (used by the Markdown, JUnit XML, terminal and plot renderers): names, units and
notes come from user documents and are plain text. :func:`terminal_text` strips control
characters and escape sequences, :func:`xml_text` strips what XML 1.0 cannot carry,
:func:`markdown_text` escapes every character that Markdown or its HTML pass-through
would interpret, and :func:`plain_plot_labels` turns off the plotting library's math
parser for the labels of a figure.

Every refusal is an :class:`OutputRefusedError` (an input/usage error: exit 2).
"""

from __future__ import annotations

import os
import re
import shutil
import stat
import tempfile
from collections.abc import Iterable
from pathlib import Path
from typing import Any

from audit.errors import AuditError

__all__ = [
    "OutputRefusedError",
    "check_new_output",
    "markdown_code",
    "markdown_text",
    "new_output_directory",
    "path_inside",
    "plain_plot_labels",
    "publish_directory",
    "terminal_text",
    "write_output_file",
    "xml_text",
]


class OutputRefusedError(AuditError, ValueError):
    """An output would overwrite a file, go through a link, or leave its folder (exit 2)."""


# ------------------------------------------------------------------------ files
def _lstat(path: Path) -> os.stat_result | None:
    try:
        return os.lstat(path)
    except FileNotFoundError:
        return None
    except OSError as exc:
        raise OutputRefusedError(f"{path}: cannot be inspected ({exc.strerror})") from None


def check_new_output(path: str | Path, *, overwrite: bool = False,
                     create_parents: bool = False, flag: str = "--overwrite") -> Path:
    """Refuse early (before any work) an output path the rule forbids.

    Parameters
    ----------
    path : str or Path
        The file to write.
    overwrite : bool, keyword-only
        The user passed the explicit flag that allows replacing an existing regular file.
    create_parents : bool, keyword-only
        A missing folder will be created (otherwise it is an error).
    flag : str, keyword-only
        The option that allows overwriting, named in the message (``""``: none exists).

    Returns
    -------
    Path

    Raises
    ------
    OutputRefusedError
        The path is a symbolic link, a directory or another non-regular file; it exists
        and ``overwrite`` is false; its folder does not exist (and ``create_parents`` is
        false) or is not a folder.
    """
    target = Path(path)
    st = _lstat(target)
    if st is not None:
        if stat.S_ISLNK(st.st_mode):
            raise OutputRefusedError(f"{path}: is a symbolic link; lti-audit never writes "
                                     "through a link (choose another output path)")
        if stat.S_ISDIR(st.st_mode):
            raise OutputRefusedError(f"{path}: is a directory; expected a file path")
        if not stat.S_ISREG(st.st_mode):
            raise OutputRefusedError(f"{path}: exists and is not a regular file")
        if not overwrite:
            how = f" unless {flag} is given" if flag else ""
            raise OutputRefusedError(f"{path}: exists already; lti-audit never overwrites a "
                                     f"file{how} (choose another path or remove it first)")
    parent = target.parent if str(target.parent) else Path(".")
    if not parent.exists():
        if not create_parents:
            raise OutputRefusedError(f"{path}: the folder {parent} does not exist")
    elif not parent.is_dir():
        raise OutputRefusedError(f"{path}: {parent} is not a folder")
    return target


def write_output_file(path: str | Path, text: str | bytes, *, overwrite: bool = False,
                      create_parents: bool = False, protected: Iterable[str | Path] = (),
                      flag: str = "--overwrite") -> Path:
    """Write a new file atomically under the output rule (see the module docstring).

    Parameters
    ----------
    path : str or Path
    text : str or bytes
        Written as UTF-8 (str) or as given (bytes).
    overwrite : bool, keyword-only
        Replace an existing regular file (never a link, never a protected file).
    create_parents : bool, keyword-only
        Create a missing folder first.
    protected : iterable of path, keyword-only
        Files that must never be replaced, even with ``overwrite`` (the run's inputs).
    flag : str, keyword-only
        The option name given in messages.

    Returns
    -------
    Path

    Raises
    ------
    OutputRefusedError
        See :func:`check_new_output`; also a protected target, an unwritable folder, or
        a file that appeared while writing.
    """
    target = Path(path)
    guarded = {os.path.realpath(p) for p in protected}  # realpath: no error on link loops
    if os.path.realpath(target) in guarded:
        raise OutputRefusedError(f"{path}: refusing to overwrite an input of this run (a "
                                 "model file or the manifest); choose another output path")
    check_new_output(target, overwrite=overwrite, create_parents=create_parents, flag=flag)
    parent = target.parent if str(target.parent) else Path(".")
    data = text.encode("utf-8") if isinstance(text, str) else bytes(text)
    try:
        if create_parents:
            parent.mkdir(parents=True, exist_ok=True)
        fd, tmp_name = tempfile.mkstemp(dir=parent, prefix=f".{target.name}.", suffix=".tmp")
    except OSError as exc:
        raise OutputRefusedError(f"{path}: cannot write in {parent} ({exc.strerror})") from None
    tmp = Path(tmp_name)
    try:
        with os.fdopen(fd, "wb") as handle:
            handle.write(data)
            handle.flush()
            os.fsync(handle.fileno())
        umask = os.umask(0)
        os.umask(umask)
        os.chmod(tmp, 0o666 & ~umask)  # mkstemp creates 0600; give the usual mode
        if overwrite:
            st = _lstat(target)  # re-check right before the rename
            if st is not None and not stat.S_ISREG(st.st_mode):
                raise OutputRefusedError(f"{path}: is no longer a regular file; not replaced")
            os.replace(tmp, target)
        else:
            try:
                os.link(tmp, target)  # atomic; fails if the name appeared meanwhile
            except FileExistsError:
                raise OutputRefusedError(f"{path}: appeared while writing; not overwritten"
                                         ) from None
    except OSError as exc:
        raise OutputRefusedError(f"{path}: cannot write ({exc.strerror})") from None
    finally:
        if tmp.exists():
            tmp.unlink()
    return target


def new_output_directory(path: str | Path, *, flag: str = "") -> Path:
    """Create an output folder that must be new or empty (``stress --out``).

    Raises
    ------
    OutputRefusedError
        The path is a symbolic link or a file, or a folder that is not empty.
    """
    target = Path(path)
    st = _lstat(target)
    if st is not None:
        if stat.S_ISLNK(st.st_mode):
            raise OutputRefusedError(f"{path}: is a symbolic link; lti-audit never writes "
                                     "through a link (choose another output folder)")
        if not stat.S_ISDIR(st.st_mode):
            raise OutputRefusedError(f"{path}: exists and is not a folder")
        if any(target.iterdir()):
            how = f" (or pass {flag})" if flag else ""
            raise OutputRefusedError(f"{path}: folder is not empty; use a fresh output "
                                     f"folder{how} so results of different runs never mix")
        return target
    try:
        target.mkdir(parents=True)
    except OSError as exc:
        raise OutputRefusedError(f"{path}: cannot create the folder ({exc.strerror})") from None
    return target


def path_inside(root: str | Path, relative: str, *, what: str = "path") -> Path:
    """Resolve ``relative`` below ``root`` and refuse anything that leaves it.

    Absolute paths, ``..`` components, empty names and symbolic links that point out of
    ``root`` are refused.

    Returns
    -------
    Path
        ``root / relative`` (not resolved, so it names what the user wrote).

    Raises
    ------
    OutputRefusedError
        The path would leave ``root``.
    """
    if not isinstance(relative, str) or not relative or "\x00" in relative:
        raise OutputRefusedError(f"{what}: expected a non-empty relative path, got "
                                 f"{relative!r}")
    pure = Path(relative)
    if pure.is_absolute() or relative.startswith(("/", "\\")) or ".." in pure.parts \
            or "\\" in relative:
        raise OutputRefusedError(f"{what}: {relative!r} leaves its folder {root} (absolute "
                                 "paths and '..' are not allowed)")
    full = Path(root) / pure
    try:
        base = Path(root).resolve()
        resolved = full.resolve()
    except (OSError, RuntimeError) as exc:  # a symbolic link loop
        raise OutputRefusedError(f"{what}: {relative!r} cannot be resolved ({exc})") from None
    if resolved != base and base not in resolved.parents:
        raise OutputRefusedError(f"{what}: {relative!r} resolves to {resolved}, outside its "
                                 f"folder {base} (a symbolic link points out of it)")
    return full


def publish_directory(staging: Path, target: Path) -> Path:
    """Give a completely written staging folder its final name; remove it on failure.

    Raises
    ------
    OutputRefusedError
        ``target`` exists (a file, a link or a folder, even an empty one).
    """
    try:
        if os.path.lexists(target):
            raise OutputRefusedError(f"{target}: exists already; never overwritten")
        os.rename(staging, target)
    except OutputRefusedError:
        shutil.rmtree(staging, ignore_errors=True)
        raise
    except OSError as exc:
        shutil.rmtree(staging, ignore_errors=True)
        raise OutputRefusedError(f"{target}: cannot be created ({exc.strerror}); "
                                 "nothing was written") from None
    return target


# ------------------------------------------------------------------------- text
# C0 and C1 control characters and DEL, except tab and newline.
_CONTROL = re.compile(r"[\x00-\x08\x0b-\x1f\x7f-\x9f]")
# ANSI/ECMA-48 sequences: CSI ... final byte, OSC ... BEL/ST, two-character ESC sequences.
_ESCAPE_SEQUENCE = re.compile(
    r"\x1b\[[0-?]*[ -/]*[@-~]|\x9b[0-?]*[ -/]*[@-~]"
    r"|\x1b\][^\x07\x1b\x9c]*(?:\x07|\x1b\\|\x9c)?|\x9d[^\x07\x1b\x9c]*(?:\x07|\x1b\\|\x9c)?"
    r"|\x1b[PX^_][^\x1b\x9c]*(?:\x1b\\|\x9c)?|\x1b[ -/]*[0-~]")
# Unicode bidirectional overrides/isolates can reorder what a reader sees.
_BIDI = re.compile(r"[\u202a-\u202e\u2066-\u2069]")


def terminal_text(text: str) -> str:
    """``text`` with escape sequences, control characters and bidi overrides removed.

    Tab and newline are kept.

    >>> terminal_text("motor\\x1b[2J\\x1b]0;owned\\x07 drive\\r")
    'motor drive'
    """
    text = _ESCAPE_SEQUENCE.sub("", text)
    return _BIDI.sub("", _CONTROL.sub("", text))


# XML 1.0 Char production (W3C XML 1.0, 5th ed., section 2.2): tab, LF, CR and
# U+0020..U+D7FF, U+E000..U+FFFD, U+10000..U+10FFFF. Escape sequences go first.
_NOT_XML = re.compile("[^\t\n\r\u0020-\ud7ff\ue000-\ufffd\U00010000-\U0010ffff]")


def xml_text(text: str) -> str:
    """``text`` without the characters XML 1.0 cannot hold (and without escape sequences).

    ElementTree escapes ``<``, ``&`` and quotes itself; this removes what no escaping can
    carry, so the document stays well-formed.

    >>> xml_text("claim\\x00\\x1b[31m one\\x0c")
    'claim one'
    """
    return _NOT_XML.sub("", _BIDI.sub("", _ESCAPE_SEQUENCE.sub("", text)))


# Characters that start Markdown markup (CommonMark 0.30 with the GitHub tables,
# strikethrough and math extensions): backslash-escaped (CommonMark section 2.4), so they
# stay literal -- no raw HTML or entities (<, &), no links or images ([, ]), no code
# spans, emphasis, strike-through or math (`, *, _, ~, $), no cell breaks (|).
_MD_SPECIAL = re.compile(r"([\\`*_\[\]<>&|~$])")
# Autolinks and mentions are not markup and cannot be backslash-escaped: a word joiner
# (U+2060, invisible) after '@' and in '://' and 'www.' stops '@all', 'user@host',
# 'https://...' and 'www....' from becoming mentions or links.
_MD_AUTOLINK = re.compile(r"(@|:(?=//)|(?<![\w.])www(?=\.))", re.IGNORECASE)


def markdown_text(text: str) -> str:
    """``text`` as literal Markdown: no HTML, no links or images, no mentions, one line.

    >>> print(markdown_text("<img src=x> [a](javascript:x) | *b*"))
    \\<img src=x\\> \\[a\\](javascript:x) \\| \\*b\\*
    """
    text = terminal_text(text).replace("\r", " ").replace("\n", " ").replace("\t", " ")
    text = _MD_SPECIAL.sub(r"\\\1", text)
    return _MD_AUTOLINK.sub("\\1\u2060", text)


def markdown_code(text: str) -> str:
    """``text`` inside a Markdown code span (a file path): backticks and pipes cannot end
    the span or the table cell; nothing in it is markup."""
    text = terminal_text(text).replace("\r", " ").replace("\n", " ").replace("\t", " ")
    return "`" + text.replace("`", "'").replace("|", "\\|") + "`"


def plain_plot_labels(fig: Any) -> Any:
    """Turn off math-text parsing for every label already placed on a matplotlib figure.

    Call it before saving: titles, axis labels, legend entries and free text then render
    a ``$`` and a backslash as the characters they are (model names are plain text).
    Tick labels are formatted at draw time and keep the library's own formatting.
    """
    from matplotlib.text import Text

    for artist in fig.findobj(Text):
        if artist.get_text():
            artist.set_parse_math(False)
            artist.set_text(xml_text(artist.get_text()))
    return fig
