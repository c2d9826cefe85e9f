"""catalog: a catalyst screening results database with ranking reports."""


def __getattr__(name: str) -> str:
    # The version is looked up on first use: importlib.metadata and the search of the installed distributions cost
    # ~40 ms, which every command paid at start-up while only --version, backups and written files show it.
    if name != "__version__":
        raise AttributeError(f"module 'catalog' has no attribute {name!r}")
    from importlib.metadata import PackageNotFoundError, version

    try:
        # The one source of the version is pyproject.toml; the installed metadata carries it.
        found = version("catalog")
    except PackageNotFoundError:  # a source tree run without installing: say so rather than guess a number
        found = "0+unknown"
    globals()["__version__"] = found
    return found
