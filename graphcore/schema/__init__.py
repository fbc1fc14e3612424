"""Schema versions of graph files and the small functions that upgrade them."""

from graphcore.schema.upgrade import UPGRADES, upgrade, register_upgrade

__all__ = ["UPGRADES", "upgrade", "register_upgrade"]
