"""``stifflane``: start the stack, or one part of it; submit and follow jobs.

Stack:
    stifflane up        embedded Redis + one worker + API and dashboard behind nginx, then the demo job
    stifflane redis     only the embedded Redis (foreground)
    stifflane api       only the API and dashboard (gunicorn)
    stifflane worker    only a worker (Celery, one process per core by default)
    stifflane warm      load or compile the engine's kernels once (done by 'up' and 'worker')

Jobs (over the API; --server URL or $STIFFLANE_URL, --key or $STIFFLANE_KEY):
    stifflane submit SPEC [--wait] [-o FILE]   submit a job spec, optionally wait and save the result
    stifflane watch ID                         follow a job with a progress bar
    stifflane result ID [-o FILE]              fetch a result (CSV, JSON or .npz)
    stifflane report ID                        the stiffness report as tables
    stifflane list / cancel ID                 list your jobs / cancel one
    stifflane validate SPEC                    check a spec locally, without a server
    stifflane batch submit|watch|table|stats|list|cancel   sweeps over parameters
    stifflane keys create|list|revoke          API keys (operator; talks to Redis)

Run 'stifflane COMMAND --help' for options and examples.
Exit codes: 0 success, 1 a part failed to start or a job failed, 2 bad arguments, 3 invalid spec,
4 other API error, 5 server unreachable, 6 key missing or refused, 7 timed out, 130 interrupted
(details in docs/cli.md).
"""
from __future__ import annotations

import argparse
import json
import os
import signal
import subprocess
import sys
import time
import urllib.error
import urllib.request
from pathlib import Path

ROOT = Path(__file__).resolve().parent.parent
DEFAULT_API_PORT = 8750
DEFAULT_REDIS_PORT = 6390
DEMO_JOB = ROOT / "examples" / "jobs" / "tarnwhistle_demo.json"


def _env(redis_url: str | None = None) -> dict:
    env = dict(os.environ)
    if redis_url:
        env["REDIS_URL"] = redis_url
    if "NUMBA_CACHE_DIR" not in os.environ:  # main() sets it: one folder per engine version
        from engine.cache import configure

        configure(ROOT / "var" / "numba-cache")
    env["NUMBA_CACHE_DIR"] = os.environ["NUMBA_CACHE_DIR"]
    env.setdefault("OPENBLAS_NUM_THREADS", "1")  # one core per worker process; no BLAS thread fights
    env["PYTHONPATH"] = os.pathsep.join(filter(None, [str(ROOT), env.get("PYTHONPATH")]))
    return env


ACCESS_LOG_FORMAT = '%(h)s %(t)s "%(m)s %(U)s %(H)s" %(s)s %(B)s %(M)sms'  # %(U)s: no query string


def api_command(host: str, port: int, workers: int = 2) -> list[str]:
    return [sys.executable, "-m", "gunicorn", "--bind", f"{host}:{port}", "--workers", str(workers),
            "--threads", "4", "--timeout", "60", "--graceful-timeout", "5",
            "--access-logfile", "-", "--access-logformat", ACCESS_LOG_FORMAT,
            "--logger-class", "service.access_log.Logger",  # JSON lines on request
            "service:create_app()"]


def worker_command(concurrency: int, queues: str | None = None) -> list[str]:
    from jobs.settings import Settings

    settings = Settings.from_env()
    queues = queues or f"{settings.interactive_queue},{settings.batch_queue}"
    from jobs.logs import log_format

    quiet = ["--quiet"] if log_format() == "json" else []  # no banner: every line is a JSON object
    return [sys.executable, "-m", "celery", *quiet, "-A", "worker.celery_app", "worker", "--loglevel", "INFO",
            "-c", str(concurrency), "-Q", queues, "--max-tasks-per-child", "500",
            "--max-memory-per-child", "2000000", "-n", f"stifflane-{os.getpid()}@%h",
            "--without-gossip", "--without-mingle"]  # cluster chatter we never use


def check_redis(redis_url: str | None = None) -> None:
    """Refuse a Redis configured to evict (it would silently drop queued jobs)."""
    from dataclasses import replace

    import redis as redis_lib

    from jobs.settings import Settings
    from jobs.store import JobStore

    settings = Settings.from_env()
    if redis_url:
        settings = replace(settings, redis_url=redis_url)
    try:
        problems = JobStore.connect(settings).durability_problems()
    except redis_lib.RedisError as e:
        print(f"warning: cannot check Redis at start ({e}); continuing", file=sys.stderr)
        return
    for p in problems:
        print(f"redis: {p}", file=sys.stderr)
    if any("maxmemory-policy" in p for p in problems):
        raise SystemExit("refusing to start on a Redis that evicts keys")


def cmd_warm(_args) -> int:
    started = time.perf_counter()
    from engine.warmup import warm_up

    warm_up()
    print(f"engine kernels ready in {time.perf_counter() - started:.1f} s")
    return 0


def cmd_redis(args) -> int:
    from cli.redis_server import start_redis

    proc = start_redis(args.port, Path(args.data))
    from cli.redis_server import local_url

    print(f"redis running (data in {args.data}); Ctrl-C stops it. For the other parts:\n"
          f"  export REDIS_URL='{local_url(args.port, Path(args.data))}'")
    try:
        return proc.wait()
    except KeyboardInterrupt:
        proc.terminate()
        proc.wait(10)
        return 130


def cmd_api(args) -> int:
    check_redis()
    if args.front:
        from cli import front

        return front.serve(args.host, args.port, args.workers, _env())
    os.execvpe(sys.executable, api_command(args.host, args.port, args.workers), _env())


def cmd_worker(args) -> int:
    env = _env()
    check_redis()
    subprocess.run([sys.executable, "-m", "cli.main", "warm"], env=env, check=True)
    from cli import supervise  # restarts the worker with backoff whenever it exits

    os.execvpe(sys.executable, supervise.command(worker_command(args.concurrency)), env)


def _wait_http(url: str, seconds: float) -> bool:
    deadline = time.time() + seconds
    while time.time() < deadline:
        try:
            with urllib.request.urlopen(url, timeout=2):
                return True
        except (urllib.error.URLError, ConnectionError, OSError):
            time.sleep(0.2)
    return False


def local_key(redis_url: str) -> str:
    """The local stack's admin key: made once, kept in var/local.key (mode 600)."""
    from dataclasses import replace

    from jobs import accounts
    from jobs.settings import Settings
    from jobs.store import JobStore

    path = ROOT / "var" / "local.key"
    store = JobStore.connect(replace(Settings.from_env(), redis_url=redis_url))
    if path.exists():
        key = path.read_text().strip()
        if accounts.authenticate(store.r, store.keys, key) is not None:
            return key
    _, key = accounts.create_key(store.r, store.keys, "lab", "admin", label="local stack")
    path.parent.mkdir(parents=True, exist_ok=True)
    path.write_text(key + "\n")
    path.chmod(0o600)
    return key


def submit_demo(base: str, key: str | None) -> None:
    auth = {"Authorization": f"Bearer {key}"} if key else {}
    body = DEMO_JOB.read_bytes()
    req = urllib.request.Request(base + "/v1/jobs", data=body, method="POST",
                                 headers={"Content-Type": "application/json", **auth})
    with urllib.request.urlopen(req, timeout=10) as resp:
        job = json.load(resp)
    job_url = base + job["links"]["self"]
    print(f"demo job submitted (invented scenario of the fictional Tarnwhistle Lab): {job_url}")
    deadline = time.time() + 120
    while time.time() < deadline:
        with urllib.request.urlopen(urllib.request.Request(job_url, headers=auth), timeout=10) as resp:
            view = json.load(resp)
        if view["state"] in ("succeeded", "failed", "cancelled"):
            print(f"demo job {view['state']}: {view.get('message') or ''}")
            if view["state"] == "succeeded":
                print(f"  result (JSON): {base}{view['links']['result']}")
                print(f"  result (CSV):  {base}{view['links']['result']}?format=csv")
            return
        time.sleep(0.5)
    print("demo job still running after 120 s; watch it on the dashboard")


def _raise_interrupt(signum, frame):
    raise KeyboardInterrupt


def cmd_up(args) -> int:
    from jobs.settings import Settings

    signal.signal(signal.SIGTERM, _raise_interrupt)  # stop the children on SIGTERM as on Ctrl-C

    procs: list[tuple[str, subprocess.Popen]] = []
    redis_url = os.environ.get("REDIS_URL")
    try:
        if not redis_url:
            from cli.redis_server import start_redis

            from cli.redis_server import local_url

            procs.append(("redis", start_redis(args.redis_port, ROOT / "var" / "redis")))
            redis_url = local_url(args.redis_port, ROOT / "var" / "redis")
        env = _env(redis_url)
        check_redis(redis_url)
        print(f"redis: {redis_url.split('@')[-1]} (password in var/redis/password)")
        subprocess.run([sys.executable, "-m", "cli.main", "warm"], env=env, check=True, cwd=ROOT)
        from cli import supervise  # restarts the worker with backoff whenever it exits

        procs.append(("worker", subprocess.Popen(supervise.command(worker_command(args.concurrency)),
                                                 env=env, cwd=ROOT)))
        from cli import front  # nginx in front of gunicorn (cli/front.py)

        procs += front.start_api("127.0.0.1", args.port, lambda name, cmd: subprocess.Popen(cmd, env=env, cwd=ROOT),
                                 front=not args.no_front)
        base = f"http://127.0.0.1:{args.port}"
        if not _wait_http(base + "/v1/health", 30):
            print("the API did not come up within 30 s", file=sys.stderr)
            return 1
        print(f"dashboard: {base}/   API: {base}/v1   OpenAPI: {base}/v1/openapi.json")
        key = None
        if Settings.from_env().auth_mode != "off":
            key = local_key(redis_url)
            print(f"API key of the local owner 'lab' (admin; also in var/local.key): {key}")
        if not args.no_demo:
            submit_demo(base, key)
        print("stack running; Ctrl-C stops every process")
        while all(p.poll() is None for _, p in procs):
            time.sleep(0.5)
        dead = [name for name, p in procs if p.poll() is not None]
        print(f"stopped because {', '.join(dead)} exited", file=sys.stderr)
        return 1
    except KeyboardInterrupt:
        return 130
    finally:
        for name, p in reversed(procs):
            if p.poll() is None:
                p.send_signal(signal.SIGTERM)
        for name, p in reversed(procs):
            try:
                p.wait(15)
            except subprocess.TimeoutExpired:
                p.kill()


STACK_EXAMPLES = {
    "up": "  stifflane up                      # Redis, a worker, API and dashboard on :8750, then the demo\n"
          "  stifflane up --port 9000 --no-demo\n"
          "  stifflane up --no-front           # gunicorn on the port itself, without nginx\n"
          "  REDIS_URL=redis://db:6379/0 stifflane up   # use an existing Redis",
    "redis": "  stifflane redis --port 6390 --data var/redis",
    "api": "  stifflane api --host 0.0.0.0 --port 8750 --workers 4 --front",
    "worker": "  stifflane worker --concurrency 2",
    "warm": "  stifflane warm",
}
STACK_EXIT_CODES = "exit codes: 0 success, 1 a part failed to start or stopped, 2 bad arguments, 130 interrupted"


def _stack_examples(sub) -> None:
    for name, text in STACK_EXAMPLES.items():
        p = sub.choices[name]
        p.formatter_class = argparse.RawDescriptionHelpFormatter
        p.epilog = f"examples:\n{text}\n\n{STACK_EXIT_CODES}"


def parser() -> argparse.ArgumentParser:
    ap = argparse.ArgumentParser(prog="stifflane", description=__doc__,
                                 formatter_class=argparse.RawDescriptionHelpFormatter)
    sub = ap.add_subparsers(dest="command", required=True)
    up = sub.add_parser("up", help="start the whole stack locally and run the demo job")
    up.add_argument("--port", type=int, default=DEFAULT_API_PORT)
    up.add_argument("--redis-port", type=int, default=DEFAULT_REDIS_PORT)
    up.add_argument("--concurrency", type=int, default=os.cpu_count() or 1)
    up.add_argument("--no-demo", action="store_true", help="do not submit the demo job")
    up.add_argument("--no-front", action="store_true",
                    help="serve gunicorn directly, without nginx in front (slow clients can stall it)")
    up.set_defaults(func=cmd_up)
    r = sub.add_parser("redis", help="start only the embedded Redis")
    r.add_argument("--port", type=int, default=DEFAULT_REDIS_PORT)
    r.add_argument("--data", default=str(ROOT / "var" / "redis"))
    r.set_defaults(func=cmd_redis)
    a = sub.add_parser("api", help="start only the API and dashboard (gunicorn)")
    a.add_argument("--host", default="127.0.0.1")
    a.add_argument("--port", type=int, default=DEFAULT_API_PORT)
    a.add_argument("--workers", type=int, default=2)
    a.add_argument("--front", action="store_true",
                   help="put nginx in front (buffers requests, times out slow clients); gunicorn on a unix socket")
    a.set_defaults(func=cmd_api)
    w = sub.add_parser("worker", help="start only a worker")
    w.add_argument("--concurrency", type=int, default=os.cpu_count() or 1)
    w.set_defaults(func=cmd_worker)
    sub.add_parser("warm", help="load or compile the engine kernels").set_defaults(func=cmd_warm)
    _stack_examples(sub)
    from cli import batch_cmds, jobs_cmds, keys, report, validate
    from cli.common import add_global_connection_args

    add_global_connection_args(ap)
    jobs_cmds.register(sub)
    report.register(sub)
    validate.register(sub)
    batch_cmds.register(sub)
    keys.register(sub)
    return ap


def main(argv: list[str] | None = None) -> int:
    from engine.cache import configure

    configure(ROOT / "var" / "numba-cache")  # before anything imports numba
    args = parser().parse_args(argv)
    return args.func(args) or 0


if __name__ == "__main__":
    sys.exit(main())
