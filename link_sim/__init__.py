"""trimlink link simulator: channel models, FEC, receiver and link budget (built on codec)."""

__all__: list[str] = []
