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
    stifflane calibrate submit|show|result|list|cancel     fit parameters to measurements
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
    from cli.warm import warm

    warm()  # with progress while compiling (cli/warm.py)
    return 0


def _refuse_busy_port(what: str, host: str, port: int, option: str) -> None:
    from cli import local_stack as ls

    if (why := ls.port_problem(host, port)) is not None:
        raise SystemExit(ls.busy_port_message(what, option, host, port, why).replace(
            "stifflane up", f"stifflane {what.lower()}"))


def cmd_redis(args) -> int:
    from cli.redis_server import start_redis

    _refuse_busy_port("Redis", "127.0.0.1", args.port, "--port")
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
    _refuse_busy_port("API", args.host, args.port, "--port")
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


def _get_json(url: str, timeout: float = 2.0) -> dict | None:
    try:
        with urllib.request.urlopen(url, timeout=timeout) as resp:
            return json.load(resp)
    except (urllib.error.URLError, ConnectionError, OSError, ValueError):
        return None


def _first_dead(procs) -> str | None:
    for name, p in procs:
        if p.poll() is not None:
            return f"{name} exited with status {p.returncode} while starting"
    return None


def wait_ready(base: str, procs, api_seconds: float = 60.0, worker_seconds: float = 90.0) -> str | None:
    """Wait for our API, then for a worker to report in. None when ready, else what went wrong.
    Our processes must stay alive meanwhile: an answer while one of them died came from someone
    else's server."""
    deadline = time.time() + api_seconds
    while (health := _get_json(base + "/v1/health")) is None:
        if (dead := _first_dead(procs)) or time.time() > deadline:
            return dead or f"the API did not answer at {base} within {api_seconds:.0f} s"
        time.sleep(0.2)
    deadline = time.time() + worker_seconds
    while not (health or {}).get("worker_count"):
        if (dead := _first_dead(procs)) or time.time() > deadline:
            return dead or f"no worker reported in within {worker_seconds:.0f} s"
        time.sleep(0.5)
        health = _get_json(base + "/v1/health")
    return _first_dead(procs)


def local_key(redis_url: str, path: Path | None = None) -> str:
    """The local stack's admin key: made once, kept in var/local.key (mode 600)."""
    from dataclasses import replace

    from jobs import accounts
    from jobs.settings import Settings
    from jobs.store import JobStore

    path = path or ROOT / "var" / "local.key"
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
    print(f"demo job submitted (invented scenario of the fictional Tarnwhistle Lab): {job_url}", flush=True)
    deadline = time.time() + 120
    while time.time() < deadline:
        with urllib.request.urlopen(urllib.request.Request(job_url, headers=auth), timeout=10) as resp:
            view = json.load(resp)
        if view["state"] in ("succeeded", "failed", "cancelled"):
            print(f"demo job {view['state']}: {view.get('message') or ''}", flush=True)
            if view["state"] == "succeeded":
                print(f"  result (JSON): {base}{view['links']['result']}")
                print(f"  result (CSV):  {base}{view['links']['result']}?format=csv", flush=True)
            return
        time.sleep(0.5)
    print("demo job still running after 120 s; watch it on the dashboard", flush=True)


def ready_block(base: str, key: str | None, key_path: Path, port: int) -> str:
    """What a user needs from the start-up, framed, so it stands apart from the log lines."""
    from cli.local_stack import shown

    lines = ["Stifflane is running", "",
             f"dashboard  {base}/",
             f"API        {base}/v1   (OpenAPI: {base}/v1/openapi.json)"]
    if key:
        lines.append(f"API key    {key}")
        lines.append(f"           (owner 'lab', admin; also in {shown(key_path)})")
    else:
        lines.append("API key    none needed (STIFFLANE_AUTH_MODE=off)")
    lines += ["", "For the Python client and the stifflane job commands, in another shell:"]
    if port != DEFAULT_API_PORT:  # the client's default address is :8750
        lines.append(f"  export STIFFLANE_URL={base}")
    if key:
        lines.append(f"  export STIFFLANE_KEY=$(cat {shown(key_path)})")
    if port == DEFAULT_API_PORT and not key:
        lines.append("  nothing to set: the client's defaults point here")
    lines += ["", "Ctrl-C stops every process (front, API, worker, then Redis)."]
    width = max(len(line) for line in lines)
    rule = "+" + "-" * (width + 4) + "+"
    return "\n".join(["", rule, *(f"|  {line:<{width}}  |" for line in lines), rule, ""])


def _raise_interrupt(signum, frame):
    raise KeyboardInterrupt


STOP_ORDER = ("front", "api", "worker", "redis")  # no request reaches a stopped worker; Redis last
STOP_SECONDS = {"front": 10.0, "api": 15.0, "worker": 10.0, "redis": 15.0}


def stop_in_order(procs, say=None) -> None:
    """Stop the stack's processes one after the other: the front and the API first (no new
    work), then the worker (a warm shutdown finishes or hands back its jobs while Redis is
    still there; SIGQUIT, a cold shutdown, if it takes too long), Redis last."""
    say = say or (lambda text: print(text, flush=True))
    rank = {name: i for i, name in enumerate(STOP_ORDER)}
    for name, p in sorted(procs, key=lambda item: rank.get(item[0], -1)):
        if p.poll() is None:
            p.send_signal(signal.SIGTERM)
            try:
                p.wait(STOP_SECONDS.get(name, 15.0))
            except subprocess.TimeoutExpired:
                if name == "worker":  # the supervisor passes it on: Celery's cold shutdown
                    p.send_signal(signal.SIGQUIT)
                    try:
                        p.wait(10)
                    except subprocess.TimeoutExpired:
                        p.kill()
                else:
                    p.kill()
                p.wait()
        say(f"stopped {name}")


def _start_problems(args, var: Path, host: str, embedded_redis: bool) -> list[str]:
    """Why the stack cannot start as asked, found before anything starts (empty when it can)."""
    from cli import local_stack as ls

    problems = []
    if (why := ls.port_problem(host, args.port)) is not None:
        problems.append(ls.busy_port_message("API", "--port", host, args.port, why))
    if embedded_redis:
        if args.redis_port == args.port:
            problems.append("--port and --redis-port must differ")
        elif (why := ls.port_problem(host, args.redis_port)) is not None:
            problems.append(ls.busy_port_message("Redis", "--redis-port", host, args.redis_port, why,
                                                 avoid={args.port}))
        if ls.is_held(ls.redis_lock(var / "redis")):
            problems.append(ls.redis_in_use_message(var / "redis"))
    return problems


def cmd_up(args) -> int:
    from cli import local_stack as ls

    var = (Path(args.var) if args.var else ls.default_var()).resolve()
    host = "127.0.0.1"
    base = f"http://{host}:{args.port}"
    lock = ls.take_lock(ls.stack_lock(var))  # held until this process ends
    if lock is None:
        print(ls.another_stack_message(var), file=sys.stderr)
        return 1
    try:
        redis_url = os.environ.get("REDIS_URL")
        problems = _start_problems(args, var, host, embedded_redis=not redis_url)
        if problems:
            print("\n".join(problems), file=sys.stderr)
            return 1
        ls.write_holder(lock, {"pid": os.getpid(), "api": base, "started": time.time(),
                               "redis_port": None if redis_url else args.redis_port})
        return _run_stack(args, var, base, redis_url)
    finally:
        os.close(lock)


def _run_stack(args, var: Path, base: str, redis_url: str | None) -> int:
    from cli.local_stack import shown
    from cli.supervise import die_with_parent
    from jobs.settings import Settings

    signal.signal(signal.SIGTERM, _raise_interrupt)  # stop the children on SIGTERM as on Ctrl-C
    procs: list[tuple[str, subprocess.Popen]] = []

    def spawn(cmd: list[str], env: dict) -> subprocess.Popen:
        # A process group of its own: Ctrl-C in the terminal reaches only this process, which
        # then stops the parts in order; each part gets SIGTERM if this process dies.
        return subprocess.Popen(cmd, env=env, cwd=ROOT, preexec_fn=die_with_parent)

    try:
        print(f"starting the local stack (folder {shown(var)})", flush=True)
        if not redis_url:
            from cli.redis_server import local_url, start_redis

            data = var / "redis"
            procs.append(("redis", start_redis(args.redis_port, data, preexec_fn=die_with_parent)))
            redis_url = local_url(args.redis_port, data)
            print(f"redis: 127.0.0.1:{args.redis_port} (data and password in {shown(data)})", flush=True)
        else:
            print(f"redis: {redis_url.split('@')[-1]} (REDIS_URL)", flush=True)
        env = _env(redis_url)
        check_redis(redis_url)
        subprocess.run([sys.executable, "-m", "cli.main", "warm"], env=env, check=True, cwd=ROOT)
        from cli import supervise  # restarts the worker with backoff whenever it exits

        print(f"worker: starting {args.concurrency} process(es)", flush=True)
        procs.append(("worker", spawn(supervise.command(worker_command(args.concurrency)), env)))
        from cli import front  # nginx in front of gunicorn (cli/front.py)

        print(f"api: gunicorn{'' if args.no_front else ' behind nginx'} on {base}", flush=True)
        procs += front.start_api("127.0.0.1", args.port, lambda name, cmd: spawn(cmd, env),
                                 front=not args.no_front, front_dir=var / "front")
        print("waiting for the API and the worker to answer ...", flush=True)
        if (problem := wait_ready(base, procs)) is not None:
            print(f"the stack did not start: {problem}", file=sys.stderr)
            return 1
        key, key_path = None, var / "local.key"
        if Settings.from_env().auth_mode != "off":
            key = local_key(redis_url, key_path)
        if not args.no_demo:
            submit_demo(base, key)
        time.sleep(0.5)  # the access-log lines of the last requests (written after the answer) land first
        print(ready_block(base, key, key_path, args.port), flush=True)
        while all(p.poll() is None for _, p in procs):
            time.sleep(0.5)
        dead = [name for name, p in procs if p.poll() is not None]
        print(f"stopped because {', '.join(dead)} exited", file=sys.stderr)
        return 1
    except KeyboardInterrupt:
        return 130
    finally:
        for signum in (signal.SIGINT, signal.SIGTERM):  # the stop below is bounded; let it finish
            signal.signal(signum, signal.SIG_IGN)
        if procs:
            print("stopping: front, API, worker, then Redis", flush=True)
        stop_in_order(procs)


STACK_EXAMPLES = {
    "up": "  stifflane up                      # Redis, a worker, API and dashboard on :8750, then the demo\n"
          "  stifflane up --port 9000 --no-demo\n"
          "  stifflane up --var var2 --port 8760 --redis-port 6391   # a second stack beside the first\n"
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
    up.add_argument("--var", metavar="DIR", default=None,
                    help="the stack's folder: Redis data, front, local key (default $STIFFLANE_VAR or "
                         "the project's var/); one stack per folder")
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
    from cli import batch_cmds, calibrate_cmds, jobs_cmds, keys, report, validate
    from cli.common import add_global_connection_args

    add_global_connection_args(ap)
    jobs_cmds.register(sub)
    report.register(sub)
    validate.register(sub)
    batch_cmds.register(sub)
    calibrate_cmds.register(sub)
    keys.register(sub)
    return ap


def main(argv: list[str] | None = None) -> int:
    from engine.cache import configure

    configure(ROOT / "var" / "numba-cache")  # before anything imports numba
    args = parser().parse_args(argv)
    return args.func(args) or 0


if __name__ == "__main__":
    sys.exit(main())
