"""JSON Pointers (RFC 6901) resolved against JSON documents, for checks that an error's
pointer names a real place of the request it came from."""

from typing import Any


def resolves(document: Any, pointer: str) -> bool:
    """Does ``pointer`` name a value inside ``document``? (RFC 6901 section 4: "" is the
    whole document; "~1" is "/", "~0" is "~"; array tokens are decimal indices.)"""
    if pointer == "":
        return True
    if not pointer.startswith("/"):
        return False
    node = document
    for token in pointer[1:].split("/"):
        token = token.replace("~1", "/").replace("~0", "~")
        if isinstance(node, dict):
            if token not in node:
                return False
            node = node[token]
        elif isinstance(node, list):
            if not token.isdigit() or (token != "0" and token.startswith("0")):
                return False
            if int(token) >= len(node):
                return False
            node = node[int(token)]
        else:
            return False
    return True
