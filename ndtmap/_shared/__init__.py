"""ndtmap._shared."""

__all__: list[str] = []
