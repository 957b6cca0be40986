"""Shared pieces of the job commands: server and key options, the client, exit codes."""
from __future__ import annotations

import argparse
import sys
from pathlib import Path

ROOT = Path(__file__).resolve().parent.parent

# Exit codes of the job commands (documented in docs/cli.md).
OK = 0
JOB_NOT_SUCCEEDED = 1   # the job failed or was cancelled
USAGE = 2               # bad arguments, or a file that cannot be read or written
INVALID_SPEC = 3        # the spec was refused (locally or with 422)
API_ERROR = 4           # any other error answer of the server (404, 409, 429 after retries...)
UNREACHABLE = 5         # the server could not be reached
AUTH = 6                # 401/403: missing, wrong or revoked key
TIMEOUT = 7             # --timeout passed before the job finished
INTERRUPTED = 130

EXIT_CODES_HELP = """exit codes: 0 success, 1 job failed or cancelled, 2 bad arguments or unreadable file,
3 invalid spec, 4 other API error, 5 server unreachable, 6 key missing or refused, 7 timed out,
130 interrupted"""


def print_caution() -> None:
    """The caution on stderr, set apart, after every command that hands out numbers."""
    print("\ncaution: " + client_module().CAUTION, file=sys.stderr)


def client_module():
    """The client package; from the source tree when it is not installed."""
    try:
        import stifflane_client
    except ImportError:
        sys.path.insert(0, str(ROOT / "client"))
        import stifflane_client
    return stifflane_client


def add_connection_args(p: argparse.ArgumentParser) -> None:
    """--server and --key, accepted before or after the command name."""
    p.add_argument("--server", metavar="URL", default=None,
                   help="API base URL (default $STIFFLANE_URL or http://127.0.0.1:8750)")
    p.add_argument("--key", default=None,
                   help="API key (default $STIFFLANE_KEY); prefer the variable: arguments show in ps")


def add_global_connection_args(p: argparse.ArgumentParser) -> None:
    p.add_argument("--server", dest="g_server", metavar="URL", default=None, help=argparse.SUPPRESS)
    p.add_argument("--key", dest="g_key", default=None, help=argparse.SUPPRESS)


def make_client(args):
    url = getattr(args, "server", None) or getattr(args, "g_server", None)
    key = getattr(args, "key", None) or getattr(args, "g_key", None)
    return client_module().Client(url, key)  # None: $STIFFLANE_URL / $STIFFLANE_KEY


def command(p: argparse.ArgumentParser, func, examples: str) -> None:
    """Attach the handler and an epilog with examples and exit codes."""
    p.formatter_class = argparse.RawDescriptionHelpFormatter
    p.epilog = "examples:\n" + examples.rstrip() + "\n\n" + EXIT_CODES_HELP
    p.set_defaults(func=guarded(func))


def guarded(func):
    """Run a command, turning the client's exceptions into a message and an exit code."""
    def run(args) -> int:
        sl = client_module()
        try:
            return func(args) or OK
        except sl.InvalidSpec as e:
            print(f"invalid spec: {e}", file=sys.stderr)
            return INVALID_SPEC
        except sl.AuthError as e:
            print(f"{e}\n(pass --key or set STIFFLANE_KEY)", file=sys.stderr)
            return AUTH
        except sl.ApiError as e:
            print(f"error: {e}", file=sys.stderr)
            return API_ERROR
        except sl.ServiceUnavailable as e:
            print(f"error: {e}\n(is the stack running? start it with 'stifflane up', or pass --server)",
                  file=sys.stderr)
            return UNREACHABLE
        except sl.WaitTimeout as e:
            print(f"error: {e}", file=sys.stderr)
            return TIMEOUT
        except OSError as e:  # a file that cannot be read or written
            print(f"error: {e}", file=sys.stderr)
            return USAGE
        except ValueError as e:  # a spec file that is not JSON
            print(f"invalid spec: {e}", file=sys.stderr)
            return INVALID_SPEC
        except KeyboardInterrupt:
            return INTERRUPTED
    run.__name__ = getattr(func, "__name__", "run")
    return run
