"""YAML files that people edit: safe loading only, and no key given twice.

``yaml.safe_load`` builds no Python objects, but it silently keeps the last
of two equal keys, so a second ``r-peak-change: off`` written further down a
limits file, or a second ``defaults:`` section in ``queue.yaml``, would
quietly override the first. :func:`load_yaml` refuses both unsafe tags and
duplicate keys with a :class:`yaml.YAMLError` that carries the line.
"""

from __future__ import annotations

import yaml


class NoDuplicatesLoader(yaml.SafeLoader):
    """Safe loader (no Python objects) that refuses a mapping key given twice."""


def _mapping_no_duplicates(loader: NoDuplicatesLoader, node: yaml.MappingNode, deep: bool = False) -> dict:
    seen = set()
    for key_node, _ in node.value:
        key = loader.construct_object(key_node, deep=deep)
        try:
            duplicate = key in seen
        except TypeError:  # an unhashable key: the base constructor reports it
            break
        if duplicate:
            raise yaml.constructor.ConstructorError(None, None, f"duplicate key {str(key)[:40]!r}", key_node.start_mark)
        seen.add(key)
    return yaml.SafeLoader.construct_mapping(loader, node, deep=deep)


NoDuplicatesLoader.add_constructor(yaml.resolver.BaseResolver.DEFAULT_MAPPING_TAG, _mapping_no_duplicates)


def load_yaml(text: str):
    """Parse ``text`` with safe loading, refusing duplicate keys (raises ``yaml.YAMLError``)."""
    return yaml.load(text, Loader=NoDuplicatesLoader)  # noqa: S506 - a SafeLoader subclass
