"""Find and load a workspace: ``mappings/canonical.yaml`` plus one mapping file per source."""

from __future__ import annotations

from dataclasses import dataclass, field
from pathlib import Path

from .errors import InputError, InputErrors, MappingError
from .mapping.load import file_hash, load_canonical, load_source_mapping
from .mapping.spec import CanonicalSchema, SourceMapping

MAPPINGS_DIR = "mappings"
CANONICAL_FILE = "canonical.yaml"


@dataclass
class SourceEntry:
    mapping: SourceMapping
    mapping_file: Path

    def data_path(self, root: Path) -> Path | None:
        if self.mapping.read.path is None:
            return None
        path = Path(self.mapping.read.path)
        return path if path.is_absolute() else root / path


@dataclass
class Workspace:
    """A loaded workspace; paths in mapping files are relative to ``root``."""

    root: Path
    canonical: CanonicalSchema
    canonical_file: Path
    sources: list[SourceEntry] = field(default_factory=list)

    def display(self, path: Path) -> str:
        """A path as the user would write it: relative to the workspace when inside it."""
        try:
            return str(path.resolve().relative_to(self.root.resolve()))
        except ValueError:
            return str(path)

    def mapping_hashes(self) -> dict[str, str]:
        files = [self.canonical_file] + [s.mapping_file for s in self.sources]
        return {self.display(f): file_hash(f) for f in files}

    @property
    def output_dir(self) -> Path:
        return self.root / self.canonical.output

    @property
    def reports_dir(self) -> Path:
        return self.root / self.canonical.reports


def load_workspace(root: str | Path = ".") -> Workspace:
    """Load and validate every mapping file of a workspace, reporting all problems at once."""
    root = Path(root)
    folder = root / MAPPINGS_DIR
    canonical_file = folder / CANONICAL_FILE
    if not canonical_file.exists():
        raise InputError(
            f"no {MAPPINGS_DIR}/{CANONICAL_FILE} in workspace '{root}'",
            file=str(canonical_file), reason="not_a_workspace",
            hint="run inside a workspace folder (one holding mappings/canonical.yaml) or pass its path",
        )

    def shown(path: Path) -> str:
        try:
            return str(path.resolve().relative_to(root.resolve()))
        except ValueError:
            return str(path)

    canonical = load_canonical(canonical_file, shown(canonical_file))
    problems: list[InputError] = []
    sources: list[SourceEntry] = []
    seen: dict[str, Path] = {}
    for path in sorted(folder.glob("*.yaml")):
        if path.name == CANONICAL_FILE:
            continue
        try:
            mapping = load_source_mapping(path, canonical, shown(path))
        except InputErrors as many:
            problems.extend(many.errors)
            continue
        except InputError as one:
            problems.append(one)
            continue
        if mapping.source in seen:
            problems.append(MappingError(
                f"source name '{mapping.source}' is already used by {shown(seen[mapping.source])}",
                file=shown(path), reason="duplicate_source", hint="give each source its own name"))
            continue
        seen[mapping.source] = path
        sources.append(SourceEntry(mapping, path))
    if problems:
        raise problems[0] if len(problems) == 1 else InputErrors(problems)
    if not sources:
        raise MappingError(f"no source mapping files in {shown(folder)}", file=shown(folder),
                           reason="no_sources", hint="add one <source>.yaml per export beside canonical.yaml")
    return Workspace(root, canonical, canonical_file, sources)
