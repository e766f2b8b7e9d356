"""Browser pages (placeholder until the pages land): ``install(app, settings)`` adds page routes and static files."""


def install(app, settings) -> None:  # noqa: ANN001 - replaced by the pages module
    return None
