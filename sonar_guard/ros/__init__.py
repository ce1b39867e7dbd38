"""The rclpy shell: the live node, message conversion, parameters, diagnostics and markers.

Importing this package does not import rclpy; its modules do (``convert`` excepted).
"""
__all__: list[str] = []
