"""Page weight: the bytes a phone downloads to open a capacitor page, as production serves it.

Not part of pytest; it prints figures and asserts nothing. It collects the static files with the
production storage (hashed names, gzip and brotli copies), runs gunicorn on loopback with the
production profile (HTTPS redirects off: plain HTTP on 127.0.0.1), signs in through the login form
in headless Chromium at phone width (390 px) and sums the bytes transferred (bodies as sent,
compressed, plus headers) for the capacitor page and everything it loads; then once more with the
browser's cache, as a technician's second capacitor page; and again for a browser that takes gzip
only.

    DATABASE_URL=postgres://... .venv/bin/python -m tests.load.page_weight --user bench-planner \\
        --password bench-planner-password [--port 8103]

The database needs a fleet and that user (e.g. `python -m tests.load.pages --build 1000`).
"""

from __future__ import annotations

import argparse
import os
import secrets
import shutil
import subprocess
import sys
import time
import urllib.request
from pathlib import Path

ROOT = Path(__file__).resolve().parents[2]


def production_env(port: int) -> dict[str, str]:
    env = dict(os.environ)
    env.update(
        FLEET_PROFILE="production",
        SECRET_KEY=secrets.token_urlsafe(48),
        ALLOWED_HOSTS="127.0.0.1",
        SECURE_SSL_REDIRECT="false",
        SESSION_COOKIE_SECURE="false",
        CSRF_COOKIE_SECURE="false",
        SECURE_HSTS_SECONDS="0",
    )
    return env


def first_capacitor_id(env: dict[str, str]) -> int:
    code = (
        "from fleet.models import Assessment; "
        "print(Assessment.objects.filter(is_current=True).order_by('id')[0].fitted_capacitor_id)"
    )
    result = subprocess.run(
        [sys.executable, "manage.py", "shell", "-c", code],
        cwd=ROOT,
        env=env,
        capture_output=True,
        text=True,
        check=True,
    )
    return int(result.stdout.strip().splitlines()[-1])


def wait_for(url: str, seconds: float = 60) -> None:
    deadline = time.monotonic() + seconds
    while time.monotonic() < deadline:
        try:
            urllib.request.urlopen(url, timeout=2)
            return
        except OSError:  # refused, reset or timed out while the workers start
            time.sleep(0.5)
    raise SystemExit(f"gunicorn did not answer at {url}")


def measure(base: str, path: str, user: str, password: str, headers: dict[str, str]) -> None:
    from playwright.sync_api import sync_playwright

    with sync_playwright() as playwright:
        browser = playwright.chromium.launch(
            executable_path=shutil.which("chromium"), args=["--no-sandbox", "--disable-background-networking"]
        )
        signing_in = browser.new_context()
        login = signing_in.new_page()
        login.goto(base + "/login/")
        login.fill("#id_username", user)
        login.fill("#id_password", password)
        login.click("button[type=submit]")
        login.wait_for_load_state("networkidle")
        phone = {"width": 390, "height": 844}
        # A fresh browser cache holding only the session cookie: the capacitor page is the first page it loads.
        context = browser.new_context(
            viewport=phone, extra_http_headers=headers, storage_state=signing_in.storage_state()
        )
        page = context.new_page()
        for visit in ("first visit", "second visit (browser cache)"):
            responses = []

            def seen(response, responses=responses):
                responses.append(response)

            page.on("response", seen)
            page.goto(base + path)
            page.wait_for_load_state("networkidle")
            page.remove_listener("response", seen)
            total = 0
            print(f"  {visit}:")
            for response in responses:
                sizes = response.request.sizes()
                sent = sizes["responseBodySize"] + sizes["responseHeadersSize"]
                total += sent
                encoding = response.headers.get("content-encoding", "-")
                cache = response.headers.get("cache-control", "-")
                name = response.url.removeprefix(base)[:60]
                print(f"    {sent:>10,} B  {response.status}  {encoding:<5} {cache[:40]:<40} {name}")
            print(f"    {total:>10,} B  in all ({total / 1e6:.2f} MB)")
        browser.close()


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__, formatter_class=argparse.RawDescriptionHelpFormatter)
    parser.add_argument("--user", required=True)
    parser.add_argument("--password", required=True)
    parser.add_argument("--port", type=int, default=8103)
    parser.add_argument("--capacitor", type=int, help="fitted capacitor id (default: the first assessed)")
    parser.add_argument("--collected", action="store_true", help="the static files are collected already")
    args = parser.parse_args()
    env = production_env(args.port)
    if not args.collected:
        subprocess.run(
            [sys.executable, "manage.py", "collectstatic", "--noinput", "-v0"], cwd=ROOT, env=env, check=True
        )
    capacitor = args.capacitor or first_capacitor_id(env)
    base = f"http://127.0.0.1:{args.port}"
    gunicorn = subprocess.Popen(
        [
            str(Path(sys.executable).with_name("gunicorn")),
            "config.wsgi:application",
            "--bind",
            f"127.0.0.1:{args.port}",
            "--workers",
            "2",
        ],
        cwd=ROOT,
        env=env,
        stdout=subprocess.DEVNULL,
        stderr=subprocess.DEVNULL,
    )
    try:
        wait_for(base + "/login/")
        path = f"/fitted-capacitors/{capacitor}/"
        print(f"capacitor page {path} at 390 px, Chromium as it is (brotli):")
        measure(base, path, args.user, args.password, {})
        print("the same for a browser that takes gzip only:")
        measure(base, path, args.user, args.password, {"Accept-Encoding": "gzip, deflate"})
    finally:
        gunicorn.terminate()
        gunicorn.wait(timeout=30)


if __name__ == "__main__":
    main()
