"""ndtmap.physics."""

__all__: list[str] = []
