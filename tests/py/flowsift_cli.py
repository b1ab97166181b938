"""Where the tests find the flowsift binary: FLOWSIFT_BIN, else the debug
build in CARGO_TARGET_DIR (default /var/tmp/flowsift-target)."""

import os


def flowsift_bin() -> str:
    explicit = os.environ.get("FLOWSIFT_BIN")
    if explicit:
        return explicit
    target = os.environ.get("CARGO_TARGET_DIR", "/var/tmp/flowsift-target")
    return os.path.join(target, "debug", "flowsift")
