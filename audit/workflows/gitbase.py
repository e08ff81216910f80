"""Compare the model files of a working tree with their versions at a git revision.

What is compared: for every model file that differs between the revision ``REF`` and
the **working tree** (committed, staged and unstaged changes alike, as
``git diff --name-status REF`` reports them, plus untracked files that are not
ignored, from ``git ls-files --others --exclude-standard``), the version at ``REF``
(read with ``git cat-file blob REF:path``, the plumbing form of ``git show REF:path``)
is audited against the file as it is now on disk. Renames found by git's rename
detection compare the old path at ``REF`` with the new path.

Which files: those matching the manifest's ``[files] include`` globs and none of its
``exclude`` globs (:func:`audit.workflows.manifest.glob_matches`), never the manifest itself.
With the default globs (``*.json``, ``*.yaml``, ``*.yml``, ``*.toml``, ``*.npz``) a
text file counts only when one of its versions is an lti-audit model document (a table
with the key ``lti_model``); other files (``package.json``...) are counted as skipped.
When the manifest lists ``include`` patterns itself, every matching file must be a
model, and one that cannot be read is reported as ``unreadable``.

Each file is classified as

``unchanged``
    the same transfer function (:func:`audit.verdict.compare.compare_pair` says equivalent);
    ``coordinate_change`` says whether the realization is identical, only the state
    coordinates changed (``similar``), or only the transfer function is the same;
``changed``
    a different transfer function, with the explanation and diagnosis of the comparison
    (or the reason the two versions cannot be compared, e.g. a new input);
``changed_internal_stability``
    the same transfer function (or an inconclusive comparison), but the new version has
    an unstable or marginally stable hidden or nearly hidden mode that the old one does
    not have (:mod:`audit.structure.internal_stability`) and no ``[[accept_hidden_instability]]``
    entry of the manifest accepts it; ``problems`` lists them (accepted ones too);
``inconclusive``, ``new``, ``deleted``, ``unreadable`` (with the error message).

No numerical method is implemented here (git is run as a subprocess; the evidence comes
from :mod:`audit.verdict.compare`).
"""

from __future__ import annotations

import dataclasses
import os
import subprocess
import tempfile
import time
from collections.abc import Sequence
from dataclasses import dataclass, field
from pathlib import Path, PurePosixPath
from typing import Any, Literal

from audit.errors import AuditError, IncompatibleModelsError, InvalidModelError, NumericalTroubleError
from audit.workflows.manifest import (
    ManifestFile,
    coordinate_change,
    decisive_peak,
    glob_matches,
    internal_stability_problems,
    problem_sentences,
)

__all__ = [
    "GIT_TIMEOUT_SECONDS",
    "ChangedFile",
    "FileChange",
    "GitBaseError",
    "changed_model_files",
    "classify_changes",
    "read_file_at",
    "resolve_revision",
]

#: Each git subprocess is stopped after this many seconds.
GIT_TIMEOUT_SECONDS = 120.0

ChangeStatus = Literal["unchanged", "changed", "changed_internal_stability", "inconclusive",
                       "new", "deleted", "unreadable"]


class GitBaseError(AuditError, ValueError):
    """git is missing, the directory is not in a repository, or ``REF`` is not found.

    An input/usage error (exit status 2). Subclasses :class:`audit.errors.AuditError`
    and ``ValueError``.
    """


# ------------------------------------------------------------------------- git
def _git(args: Sequence[str], *, cwd: Path) -> subprocess.CompletedProcess[bytes]:
    env = dict(os.environ)
    env.update({"GIT_TERMINAL_PROMPT": "0", "LC_ALL": "C", "GIT_PAGER": "cat"})
    try:
        return subprocess.run(["git", *args], cwd=cwd, capture_output=True, env=env,
                              timeout=GIT_TIMEOUT_SECONDS, check=False)
    except FileNotFoundError:
        raise GitBaseError("git is not installed or not on PATH; --against needs git") from None
    except subprocess.TimeoutExpired:
        raise GitBaseError(f"git {' '.join(args)} did not finish within "
                           f"{GIT_TIMEOUT_SECONDS:g} s") from None


def _stderr(proc: subprocess.CompletedProcess[bytes]) -> str:
    return proc.stderr.decode("utf-8", "replace").strip()


def repository_root(directory: str | Path) -> Path:
    """The top level of the git work tree containing ``directory``.

    Raises
    ------
    GitBaseError
        ``directory`` is not inside a git work tree (or git is missing).
    """
    proc = _git(["rev-parse", "--show-toplevel"], cwd=Path(directory))
    if proc.returncode != 0:
        raise GitBaseError(f"{directory}: not inside a git repository ({_stderr(proc)}); "
                           "--against compares with a git revision")
    return Path(proc.stdout.decode("utf-8").strip()).resolve()


def resolve_revision(ref: str, *, cwd: str | Path) -> str:
    """The full commit id of ``ref`` (``git rev-parse --verify REF^{commit}``).

    Parameters
    ----------
    ref : str
        A branch, tag, commit id, ``HEAD~1``, ``origin/main``...
    cwd : str or Path, keyword-only
        A directory inside the repository.

    Returns
    -------
    str
        40 (or 64) hexadecimal digits.

    Raises
    ------
    GitBaseError
        ``ref`` is not a commit of this repository; the message gives a git command that
        fits the kind of ref (remote branch, commit, relative ref, shallow clone).
    """
    if not ref or ref.startswith("-"):
        raise GitBaseError(f"--against: {ref!r} is not a git revision")
    root = repository_root(cwd)
    proc = _git(["rev-parse", "--verify", "--quiet", f"{ref}^{{commit}}"], cwd=root)
    if proc.returncode != 0:
        shallow = _git(["rev-parse", "--is-shallow-repository"], cwd=root)
        is_shallow = shallow.returncode == 0 and shallow.stdout.strip() == b"true"
        where = " (this is a shallow clone)" if is_shallow else ""
        raise GitBaseError(f"--against: {ref} not found{where}; "
                           + _fetch_hint(ref, root, is_shallow))
    return proc.stdout.decode("ascii").strip()


def _fetch_hint(ref: str, root: Path, shallow: bool) -> str:
    """A git command that would make ``ref`` resolvable, valid for the kind of ref given."""
    import re

    depth = "--depth=50 " if shallow else ""
    proc = _git(["remote"], cwd=root)
    remotes = proc.stdout.decode("utf-8", "replace").split() if proc.returncode == 0 else []
    if ref.startswith("HEAD") or re.search(r"[~^@{]", ref):  # relative to a commit
        if shallow:
            return ("deepen the clone first: git fetch --deepen=50 (or git fetch --unshallow), "
                    "or name a branch or tag")
        return "the repository's history does not reach it; name a branch, tag or commit"
    if not remotes:
        return ("this repository has no remote to fetch it from; check the name "
                "(git branch -a, git tag -l)")
    remote, _, branch = ref.partition("/")
    # an explicit refspec: a single-branch clone (CI checkouts) has no default one for it
    if remote in remotes and branch:
        return f"fetch it first: git fetch {depth}{remote} {branch}:refs/remotes/{remote}/{branch}"
    first = "origin" if "origin" in remotes else remotes[0]
    if re.fullmatch(r"[0-9a-fA-F]{7,64}", ref):
        return f"fetch the commit first: git fetch {depth}{first} {ref}"
    return (f"if it is a branch of {first}: git fetch {depth}{first} "
            f"{ref}:refs/remotes/{first}/{ref}, then use --against {first}/{ref}")


def read_file_at(commit: str, repo_path: str, *, cwd: str | Path) -> bytes:
    """The content of ``repo_path`` (relative to the repository root) at ``commit``.

    Raises
    ------
    GitBaseError
        The path does not exist at that commit or git fails.
    """
    proc = _git(["cat-file", "blob", f"{commit}:{repo_path}"], cwd=Path(cwd))
    if proc.returncode != 0:
        raise GitBaseError(f"cannot read {repo_path} at {commit[:12]}: {_stderr(proc)}")
    return proc.stdout


@dataclass(frozen=True)
class ChangedFile:
    """One file that differs between ``REF`` and the working tree.

    Attributes
    ----------
    path : str
        Relative to the manifest's directory, ``/``-separated (the new path of a rename).
    repo_path : str
        Relative to the repository root (for ``git cat-file``).
    old_path, old_repo_path : str or None
        The path at ``REF`` (differs from ``path`` only for renames; ``None`` for new files).
    git_status : str
        ``M``, ``A``, ``D``, ``T``, ``R<score>``, ``C<score>`` or ``??`` (untracked).
    """

    path: str
    repo_path: str
    old_path: str | None
    old_repo_path: str | None
    git_status: str


def changed_model_files(
    manifest: ManifestFile, commit: str
) -> tuple[list[ChangedFile], Path]:
    """Files that differ between ``commit`` and the working tree and match the globs.

    Parameters
    ----------
    manifest : ManifestFile
        Supplies the directory and the ``[files]`` globs.
    commit : str
        A commit id (see :func:`resolve_revision`).

    Returns
    -------
    files : list of ChangedFile
        Sorted by path; files outside the manifest's directory are left out.
    root : Path
        The repository root.

    Raises
    ------
    GitBaseError
        git fails.
    """
    root = repository_root(manifest.directory)
    proc = _git(["diff", "--name-status", "-z", "-M", "--no-ext-diff", commit, "--"], cwd=root)
    if proc.returncode != 0:
        raise GitBaseError(f"git diff against {commit[:12]} failed: {_stderr(proc)}")
    fields = proc.stdout.decode("utf-8", "surrogateescape").split("\0")
    entries: list[tuple[str, str | None, str]] = []  # (status, old, new)
    i = 0
    while i < len(fields) and fields[i]:
        status = fields[i]
        if status[:1] in ("R", "C"):
            entries.append((status, fields[i + 1], fields[i + 2]))
            i += 3
        else:
            path = fields[i + 1]
            entries.append((status, None if status == "A" else path, path))
            i += 2
    untracked = _git(["ls-files", "--others", "--exclude-standard", "-z"], cwd=root)
    if untracked.returncode != 0:
        raise GitBaseError(f"git ls-files failed: {_stderr(untracked)}")
    for path in untracked.stdout.decode("utf-8", "surrogateescape").split("\0"):
        if path:
            entries.append(("??", None, path))
    selection = manifest.content.files
    manifest_rel = _relative(manifest.path.resolve(), root) if manifest.path else None
    found = []
    for status, old, new in entries:
        if status[:1] == "C":  # a copy: the old file is unchanged, the copy is new
            old = None
        if new == manifest_rel:
            continue
        rel = _relative(root / new, manifest.directory)
        old_rel = None if old is None else _relative(root / old, manifest.directory)
        if rel is None:
            continue
        if not any(glob_matches(rel, p) for p in selection.include):
            continue
        if any(glob_matches(rel, p) for p in selection.exclude):
            continue
        found.append(ChangedFile(rel, new, old_rel or (None if old is None else old), old, status))
    found.sort(key=lambda f: f.path)
    return found, root


def _relative(path: Path, directory: Path) -> str | None:
    try:
        return PurePosixPath(Path(os.path.normpath(path)).relative_to(directory).as_posix()).as_posix()
    except ValueError:
        return None


# ------------------------------------------------------------------ results
@dataclass(frozen=True)
class FileChange:
    """The classification of one changed model file.

    Attributes
    ----------
    path : str
        Relative to the manifest's directory.
    old_path : str or None
        Path at ``REF`` when it differs (rename).
    git_status : str
        As in :class:`ChangedFile`.
    status : {"unchanged", "changed", "inconclusive", "new", "deleted", "unreadable"}
    explanation : str
        Plain sentences.
    coordinate_change : {"identical", "similar", "transfer_only"} or None
        For ``unchanged`` files: identical realization, only the state coordinates
        changed, or only the transfer function is the same.
    peak_relative_difference, peak_frequency_rad_s : float or None
        Of the decisive evidence (relative peak gain of old - new, and where it peaks).
    diagnosis : dict
        :attr:`audit.verdict.compare.PairComparison.diagnosis` for ``changed`` files.
    warnings : tuple of str
    details : dict
        The full comparison (:meth:`audit.verdict.compare.PairComparison.as_dict`) when one ran.
    seconds : float
    problems : tuple of dict
        New unstable / marginal hidden or nearly hidden modes (the compare report's
        ``problems`` entries), accepted or not.
    """

    path: str
    old_path: str | None
    git_status: str
    status: ChangeStatus
    explanation: str
    coordinate_change: str | None = None
    peak_relative_difference: float | None = None
    peak_frequency_rad_s: float | None = None
    diagnosis: dict[str, Any] = field(default_factory=dict)
    warnings: tuple[str, ...] = ()
    details: dict[str, Any] = field(default_factory=dict)
    seconds: float = 0.0
    problems: tuple[dict[str, Any], ...] = ()

    def as_dict(self) -> dict[str, Any]:
        """JSON-friendly dictionary (floats, lists, strings; complex as [re, im])."""
        from audit.evidence.record import to_jsonable

        return {
            "path": self.path,
            "old_path": self.old_path,
            "git_status": self.git_status,
            "status": self.status,
            "explanation": self.explanation,
            "coordinate_change": self.coordinate_change,
            "peak_relative_difference": to_jsonable(self.peak_relative_difference),
            "peak_frequency_rad_s": to_jsonable(self.peak_frequency_rad_s),
            "diagnosis": to_jsonable(self.diagnosis),
            "warnings": list(self.warnings),
            "details": to_jsonable(self.details),
            "seconds": round(float(self.seconds), 6),
            "problems": to_jsonable(list(self.problems)),
        }


# -------------------------------------------------------------- model reading
def _looks_like_model(data: bytes, suffix: str) -> bool | None:
    """True: a model document; False: parses but is something else; None: unparseable.

    Parsed with the same hardened readers as model files (depth and integer-size limits,
    YAML 1.2 core schema), so a hostile file in any revision is "unreadable", not a crash.
    """
    from audit.documents.loading import _parse_json, _parse_toml, _parse_yaml

    if suffix == ".npz":
        return True
    parsers = {".json": _parse_json, ".toml": _parse_toml, ".yaml": _parse_yaml, ".yml": _parse_yaml}
    if suffix not in parsers:
        return None
    try:
        parsed = parsers[suffix](data.decode("utf-8-sig"), "revision")
    except (AuditError, UnicodeDecodeError, RecursionError):
        return None
    return isinstance(parsed, dict) and "lti_model" in parsed


def _realization_from_bytes(data: bytes, name: str, label: str) -> Any:
    """Load a model from bytes (written to a private temporary file with the same suffix)."""
    from audit.documents.loading import load_realization

    suffix = PurePosixPath(name).suffix.lower()
    with tempfile.TemporaryDirectory(prefix="lti-audit-") as tmp:
        path = Path(tmp) / ("model" + suffix)
        path.write_bytes(data)
        try:
            r = load_realization(path)
        except AuditError as exc:
            raise InvalidModelError(str(exc).replace(str(path), label)) from None
    return r


def _load_new(directory: Path, rel: str) -> Any:
    from audit.documents.loading import load_realization

    path = directory / rel
    try:
        return load_realization(path)
    except AuditError as exc:
        raise InvalidModelError(str(exc).replace(str(path), rel, 1)) from None


def classify_changes(
    manifest: ManifestFile,
    ref: str,
    *,
    rtol: float | None = None,
    escalation_seconds: float | None = None,
) -> tuple[tuple[FileChange, ...], str, tuple[str, ...]]:
    """Classify every model file changed since ``ref`` (see the module docstring).

    Parameters
    ----------
    manifest : ManifestFile
        Directory and file globs (see :func:`audit.workflows.manifest.default_manifest` when there
        is no manifest file).
    ref : str
        The git revision to compare with.
    rtol : float or None, keyword-only
        Tolerance (default: the manifest's ``rtol``, else
        :data:`audit.evidence.record.DEFAULT_RTOL`).
    escalation_seconds : float or None, keyword-only
        Extended-precision budget per file (:class:`audit.verdict.compare.Options`).

    Returns
    -------
    changes : tuple of FileChange
        Sorted by path.
    commit : str
        The commit ``ref`` resolved to.
    skipped : tuple of str
        Changed files that matched the default globs but are not model documents.

    Raises
    ------
    GitBaseError
        git is missing, the directory is not in a repository, or ``ref`` is not found.
    """
    from audit.evidence.record import DEFAULT_RTOL

    commit = resolve_revision(ref, cwd=manifest.directory)
    files, root = changed_model_files(manifest, commit)
    strict = manifest.content.include_given
    tol = rtol if rtol is not None else (manifest.content.rtol or DEFAULT_RTOL)
    changes: list[FileChange] = []
    skipped: list[str] = []
    for f in files:
        start = time.perf_counter()
        result = _classify_one(f, commit, ref, root, manifest.directory, strict, tol,
                               escalation_seconds, manifest.content.accept_hidden_instability)
        if result is None:
            skipped.append(f.path)
            continue
        changes.append(dataclasses.replace(result, seconds=time.perf_counter() - start))
    return tuple(changes), commit, tuple(skipped)


def _classify_one(f: ChangedFile, commit: str, ref: str, root: Path, directory: Path,
                  strict: bool, rtol: float, escalation_seconds: float | None,
                  acceptances: Sequence[Any] = ()) -> FileChange | None:
    suffix = PurePosixPath(f.path).suffix.lower()
    old_label = f"{f.old_path or f.path}@{ref}"
    base = dict(path=f.path, old_path=f.old_path if f.old_path != f.path else None,
                git_status=f.git_status)
    old_bytes = None
    if f.old_repo_path is not None:
        old_bytes = read_file_at(commit, f.old_repo_path, cwd=root)
    new_path = directory / f.path
    new_bytes = new_path.read_bytes() if new_path.is_file() else None
    looks = [x for x in (old_bytes, new_bytes) if x is not None]
    verdicts = [_looks_like_model(b, suffix) for b in looks]
    if not strict and not any(v is True for v in verdicts):
        return None
    if new_bytes is None:
        return FileChange(**base, status="deleted",
                          explanation=f"{f.path} was deleted (it existed at {ref}).")
    if old_bytes is None:
        try:
            r = _load_new(directory, f.path)
        except (InvalidModelError, NumericalTroubleError) as exc:
            return FileChange(**base, status="unreadable", explanation=str(exc))
        return FileChange(**base, status="new", explanation=(
            f"{f.path} is new (not at {ref}): order {r.order}, {r.n_inputs} input(s), "
            f"{r.n_outputs} output(s), "
            + ("continuous time." if r.sample_period is None else f"sample period {r.sample_period:g} s.")))
    try:
        new = _load_new(directory, f.path).with_name(f.path)
    except (InvalidModelError, NumericalTroubleError) as exc:
        return FileChange(**base, status="unreadable", explanation=f"the new version: {exc}")
    try:
        old = _realization_from_bytes(old_bytes, f.old_path or f.path, old_label).with_name(old_label)
    except (InvalidModelError, NumericalTroubleError) as exc:
        return FileChange(**base, status="unreadable",
                          explanation=f"the version at {ref} cannot be read: {exc}")
    return _compare_versions(base, old, new, rtol, escalation_seconds, acceptances)


def _compare_versions(base: dict[str, Any], old: Any, new: Any, rtol: float,
                      escalation_seconds: float | None,
                      acceptances: Sequence[Any] = ()) -> FileChange:
    from audit.core.realization import check_comparable
    from audit.verdict.compare import Options, compare_pair

    try:
        check_comparable(old, new)
    except IncompatibleModelsError as exc:
        return FileChange(**base, status="changed",
                          explanation=f"{new.name} cannot be compared with {old.name}: {exc}.")
    opts = Options(rtol=rtol) if escalation_seconds is None else Options(
        rtol=rtol, escalate=escalation_seconds > 0, escalation_seconds=escalation_seconds)
    try:
        pair = compare_pair(old, new, options=opts)
    except NumericalTroubleError as exc:
        return FileChange(**base, status="inconclusive",
                          explanation=f"a computation could not be trusted: {exc}")
    peak, freq = decisive_peak(pair)
    problems = internal_stability_problems(old, new, base["path"], acceptances)
    common = dict(peak_relative_difference=peak, peak_frequency_rad_s=freq,
                  warnings=tuple(pair.warnings), details=pair.as_dict(),
                  problems=tuple(problems))
    if pair.verdict != "different" and any(not p["accepted"] for p in problems):
        return FileChange(**base, **common, status="changed_internal_stability",
                          explanation=f"{problem_sentences(problems)} Input-output: "
                          f"{pair.explanation}")
    if problems:  # accepted ones, or a changed transfer function as well: say so
        pair_text = f"{pair.explanation} {problem_sentences(problems)}"
        pair = dataclasses.replace(pair, explanation=pair_text)
    if pair.verdict == "equivalent":
        kind, words, _ = coordinate_change(old, new, pair)
        return FileChange(**base, **common, status="unchanged", coordinate_change=kind,
                          explanation=f"Behaviour unchanged: {pair.explanation} {words[:1].upper()}{words[1:]}.")
    if pair.verdict == "different":
        return FileChange(**base, **common, status="changed", diagnosis=dict(pair.diagnosis),
                          explanation=f"Behaviour changed: {pair.explanation}")
    return FileChange(**base, **common, status="inconclusive", explanation=pair.explanation)
