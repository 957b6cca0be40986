"""Service figures (filled in below)."""


def run(quick: bool, log=print) -> dict:
    return {"status": "unavailable", "message": "not implemented yet"}
