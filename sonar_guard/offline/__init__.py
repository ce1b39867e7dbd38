"""Offline tools: read recordings, replay them through the engine, report and tune."""

__all__: list[str] = []
