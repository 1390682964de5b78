"""YAML as ``yaml.safe_load`` reads it, but refusing a mapping that repeats a key.

PyYAML keeps the last of two equal keys without a word (``input_rate`` given twice
silently takes the second).  :func:`safe_load_unique` is ``yaml.safe_load`` with one
check added in the safe loader's own mapping constructor: a repeated key raises a
``yaml.constructor.ConstructorError`` that names it and marks its line, which the
callers turn into their one-line messages like any other malformed YAML.
"""

import yaml

__all__ = ["safe_load_unique"]


class _UniqueKeyLoader(yaml.SafeLoader):
    """The safe loader (plain YAML types only), refusing repeated mapping keys."""

    def construct_mapping(self, node, deep=False):
        seen = set()
        for key_node, _ in node.value:
            if key_node.tag == "tag:yaml.org,2002:merge":
                continue
            key = self.construct_object(key_node, deep=True)
            try:
                repeated = key in seen
                seen.add(key)
            except TypeError:  # an unhashable key: the safe loader refuses it itself
                continue
            if repeated:
                raise yaml.constructor.ConstructorError(
                    None, None, f"found the key {key!r} twice in one mapping", key_node.start_mark
                )
        return super().construct_mapping(node, deep=deep)


def safe_load_unique(text):
    """``yaml.safe_load(text)``, refusing a mapping that repeats a key."""
    return yaml.load(text, Loader=_UniqueKeyLoader)  # noqa: S506 - a SafeLoader subclass
