"""Dispatcher status page: server-rendered HTML under ``/status``.

Sign-in: a person pastes a viewer, dispatcher or admin token once into the form at
``/status/sign-in`` (HTTP Basic is not offered). The token is checked with
:func:`service.auth.caller_from_token`; the session is Flask's signed cookie (``HttpOnly``,
``SameSite=Strict``, see the app config) and holds only the token's id, name and role, a CSRF
token and the sign-in time, never the token. Every page load looks the token row up by id and
refuses it once revoked. Sessions end after :data:`SESSION_HOURS` hours or on sign-out.

Every form carries a per-session random CSRF token in a hidden field, compared with
:func:`hmac.compare_digest`. Every response of this blueprint gets a strict CSP (no inline script
or style, nothing from elsewhere), ``nosniff`` and ``no-store``. Errors are small HTML pages.
The data comes from :mod:`service.schedule` (looked up at call time).
"""

from __future__ import annotations

import datetime as dt
import hmac
import importlib
import logging
import re
import secrets
import time
import zoneinfo
from functools import wraps
from pathlib import Path
from types import ModuleType
from typing import Any
from urllib.parse import urlencode

from flask import (
    Blueprint,
    Flask,
    Response,
    current_app,
    g,
    redirect,
    render_template,
    request,
    send_from_directory,
    session,
    url_for,
)
from sqlalchemy import select
from sqlalchemy.exc import DBAPIError
from werkzeug.exceptions import HTTPException

from service.auth import SESSION, Caller, allow, caller_from_token
from service.errors import Problem
from service.persistence import repository as repo
from service.persistence.db import get_session
from service.persistence.models import Token, Truck
from service.web import formatting
from service.web.chart import chart_id, level_svg

HERE = Path(__file__).resolve().parent
CHART_DAYS = 28
SESSION_HOURS = 12
MAX_TOKEN_CHARS = 200
ASCII_WEEK = re.compile(r"[0-9]{4}-W[0-9]{2}")
FIRST_YEAR, LAST_YEAR = 1900, 2999  # weeks the page shows (and their neighbours) stay far from date.min/max

PAGE_HEADERS = {
    "Content-Security-Policy": "default-src 'none'; style-src 'self'; img-src 'self'; form-action 'self'; "
    "frame-ancestors 'none'; base-uri 'none'",
    "X-Content-Type-Options": "nosniff",
    "Cache-Control": "no-store",
    "Referrer-Policy": "no-referrer",
}

#: Warning kinds: a word for the badge and an order (most urgent first).
NOTICE_KINDS = {
    "run_out_risk": ("Run-out risk", 0),
    "no_active_plan": ("No active plan", 1),
    "plan_stale": ("Plan out of date", 2),
    "no_recent_reading": ("No recent reading", 3),
}

log = logging.getLogger("ullage.web")
bp = Blueprint("status", __name__, url_prefix="/status", template_folder="templates")


def schedule() -> ModuleType:
    """The schedule module (imported when first needed)."""
    return importlib.import_module("service.schedule")


def settings() -> Any:
    return current_app.config["ULLAGE_SETTINGS"]


# ---------------------------------------------------------------- headers and errors


@bp.after_request
def _page_headers(response: Response) -> Response:
    for name, value in PAGE_HEADERS.items():
        response.headers[name] = value
    return response


def error_page(status: int, title: str, message: str) -> tuple[str, int]:
    return render_template("status_error.html", status=status, title=title, message=message), status


@bp.errorhandler(HTTPException)
def _http_error(error: HTTPException) -> tuple[str, int]:
    status = error.code or 500
    messages = {
        404: "There is no such page or site.",
        405: "This page does not accept that kind of request.",
        413: "The form was too large.",
    }
    return error_page(status, error.name, messages.get(status, error.description or error.name))


@bp.errorhandler(Problem)
def _problem(error: Problem) -> tuple[str, int]:
    return error_page(error.status, error.title or "Error", error.detail)


@bp.errorhandler(Exception)
def _unexpected(error: Exception) -> tuple[str, int]:
    db_session = g.get("db_session")
    if db_session is not None:
        try:
            db_session.rollback()
        except Exception:  # noqa: BLE001 - the connection may already be gone
            db_session.invalidate()
    if isinstance(error, DBAPIError):
        log.warning("status page: database unavailable: %s", type(getattr(error, "orig", error)).__name__)
        return error_page(503, "Database unavailable", "The database is not available right now. Try again shortly.")
    log.exception("status page: unhandled error")
    return error_page(500, "Something went wrong", "Something went wrong on our side.")


# ---------------------------------------------------------------- session and CSRF


def csrf_token() -> str:
    """This session's CSRF token (created on first use)."""
    token = session.get("csrf")
    if not isinstance(token, str) or not token:
        token = secrets.token_urlsafe(32)
        session["csrf"] = token
    return token


def check_csrf() -> None:
    sent = request.form.get("csrf", "")
    expected = session.get("csrf")
    if (
        not isinstance(expected, str)
        or not expected
        or not hmac.compare_digest(sent.encode("utf-8"), expected.encode("utf-8"))
    ):
        raise Problem(
            400,
            "The form had expired or did not come from this page. Reload the page and try again.",
            title="Form expired",
        )


def signed_in() -> Caller | None:
    """The person signed in with this cookie, re-checked against the token row; else ``None``."""
    token_id, name, at = session.get("uid"), session.get("name"), session.get("at")
    if not isinstance(token_id, int) or not isinstance(name, str) or not isinstance(at, (int, float)):
        return None
    if time.time() - at > SESSION_HOURS * 3600:
        _forget()
        return None
    row = get_session().get(Token, token_id)
    if row is None or row.revoked_at is not None or row.name != name:
        _forget()
        return None
    return Caller(row.id, row.name, row.role)


def _forget() -> None:
    for key in ("uid", "name", "role", "at"):
        session.pop(key, None)


def safe_next(target: str | None) -> str | None:
    """Only a path of this page may be a redirect target (no open redirect)."""
    if not target or len(target) > 400 or "\\" in target:
        return None
    if not (target == "/status" or target.startswith(("/status/", "/status?"))):
        return None
    if target.startswith("//") or any(ord(c) < 33 for c in target):
        return None
    if target.startswith(("/status/sign-in", "/status/sign-out", "/status/static")):
        return None
    return target.rstrip("?")


def page(view):  # type: ignore[no-untyped-def]
    """A page for signed-in people: otherwise 303 to the sign-in form."""

    @wraps(view)
    def wrapper(*args, **kwargs):  # type: ignore[no-untyped-def]
        caller = signed_in()
        if caller is None:
            query = urlencode({"next": request.full_path.rstrip("?")})
            return redirect(f"{url_for('status.sign_in')}?{query}", 303)
        g.caller = caller
        return view(*args, **kwargs)

    return wrapper


@bp.app_template_global()
def status_csrf() -> str:
    return csrf_token()


@bp.context_processor
def _template_values() -> dict[str, Any]:
    config = settings()
    return {"unit": config.quantity_unit, "currency": config.currency, "caller": g.get("caller"), "fmt": formatting}


# ---------------------------------------------------------------- routes


@bp.get("/static/<path:filename>")
@allow(SESSION)
def static(filename: str) -> Response:
    """The stylesheet (needed before sign-in too)."""
    return send_from_directory(HERE / "static", filename, max_age=0)


@bp.route("/sign-in", methods=["GET", "POST"])
@allow(SESSION)
def sign_in() -> Any:
    target = safe_next(request.values.get("next"))
    if request.method == "GET":
        return render_template("status_sign_in.html", next=target, error=None, already=signed_in())
    check_csrf()
    token = request.form.get("token", "").strip()
    caller = caller_from_token(token) if token and len(token) <= MAX_TOKEN_CHARS else None
    if caller is None:
        log.info("status page: sign-in refused")
        return render_template(
            "status_sign_in.html", next=target, already=None, error="That token is not valid or has been revoked."
        ), 401
    session.clear()
    session.update(
        uid=caller.token_id, name=caller.name, role=caller.role, at=int(time.time()), csrf=secrets.token_urlsafe(32)
    )
    g.caller = caller
    return redirect(target or url_for("status.overview"), 303)


@bp.route("/sign-out", methods=["GET", "POST"])
@allow(SESSION)
def sign_out() -> Any:
    if request.method == "GET":
        return render_template("status_sign_out.html", already=signed_in())
    check_csrf()
    session.clear()
    return redirect(url_for("status.sign_in"), 303)


@bp.get("")
@allow(SESSION)
@page
def overview() -> Any:
    """Every truck: warnings first, the active plan in one line, the week's trips, small level charts."""
    sched, config, db = schedule(), settings(), get_session()
    week = request.args.get("week") or sched.current_week(config)
    try:
        if not ASCII_WEEK.fullmatch(week):
            raise ValueError(week)
        monday, sunday = sched.iso_week(week)
    except (ValueError, TypeError, LookupError, OverflowError) as exc:
        raise Problem(400, "The week must be an ISO week such as 2026-W49.", title="Unknown week") from exc
    if not FIRST_YEAR <= monday.year <= LAST_YEAR:
        raise Problem(400, f"Choose a week from {FIRST_YEAR} to {LAST_YEAR}.", title="Unknown week")
    week = formatting.iso_week_of(monday)
    trucks = list(db.scalars(select(Truck).where(Truck.active.is_(True)).order_by(Truck.code)))
    panels, warnings = [], []
    for truck in trucks:
        panel = _truck_panel(sched, db, truck, monday, sunday, config)
        panels.append(panel)
        warnings.extend(panel["warnings"])
    return render_template(
        "status_overview.html",
        week=week,
        monday=monday,
        sunday=sunday,
        previous_week=formatting.iso_week_of(monday - dt.timedelta(days=7)),
        next_week=formatting.iso_week_of(monday + dt.timedelta(days=7)),
        this_week=sched.current_week(config),
        panels=panels,
        warnings=_sorted_warnings(warnings),
        chart_days=CHART_DAYS,
    )


@bp.get("/sites/<code>")
@allow(SESSION)
@page
def site_page(code: str) -> Any:
    """One site's projected tank level for the next 28 days."""
    sched, config, db = schedule(), settings(), get_session()
    try:
        site = repo.site_by_code(db, code)
    except repo.NotFound as exc:
        raise Problem(404, "There is no site with this code.", title="Not found") from exc
    truck = db.get(Truck, site.truck_id)
    first = today(config)
    levels = sched.site_levels(db, site, first, CHART_DAYS, config)
    label = f"{site.name} ({site.code})"
    chart = level_svg(levels, unit=config.quantity_unit, site_label=label, element_id=chart_id("chart", site.code))
    last = first + dt.timedelta(days=CHART_DAYS - 1)
    deliveries = [(d, q) for d, q in levels.deliveries if first <= d <= last]
    return render_template(
        "status_site.html",
        site=site,
        truck=truck,
        levels=levels,
        chart=chart,
        first=first,
        last=last,
        deliveries=deliveries,
        delivery_dates={d for d, _ in deliveries},
        has_level=any(v is not None for _, v in levels.days),
        warnings=_sorted_warnings(_dedupe(levels.notices)),
        week=formatting.iso_week_of(first),
    )


@bp.route("/<path:rest>", methods=["GET", "POST"])
@allow(SESSION)
def not_found(rest: str) -> Any:
    return error_page(404, "Not Found", "There is no such page or site.")


# ---------------------------------------------------------------- helpers


def today(config: Any) -> dt.date:
    return dt.datetime.now(zoneinfo.ZoneInfo(config.timezone)).date()


def _truck_panel(
    sched: ModuleType, db: Any, truck: Truck, monday: dt.date, sunday: dt.date, config: Any
) -> dict[str, Any]:
    view, notices = None, []
    try:
        view = sched.trips_view(db, truck, monday, sunday, config)
    except sched.NoActivePlan:
        notices.append(_notice("no_active_plan", f"Truck {truck.code} has no active plan, so no trips are scheduled."))
    plan = view.plan if view is not None else None
    if view is not None:
        notices.extend(view.notices)
        for trip in view.trips:
            for stop in trip.stops:
                notices.extend(stop.notices)
        if plan is None:
            notices.append(
                _notice("no_active_plan", f"Truck {truck.code} has no active plan, so no trips are scheduled.")
            )
        elif plan.stale and not any(n.kind == "plan_stale" for n in notices):
            changed = ", ".join(plan.changed_sites) or "some sites"
            notices.append(
                _notice("plan_stale", f"The plan for {truck.code} is out of date: {changed} changed since it was made.")
            )
    sites = repo.active_sites(db, truck)
    charts = []
    for site in sites:
        levels = sched.site_levels(db, site, monday, CHART_DAYS, config)
        notices.extend(levels.notices)
        label = f"{site.name} ({site.code})"
        charts.append(
            {
                "site": site,
                "levels": levels,
                "svg": level_svg(
                    levels,
                    unit=config.quantity_unit,
                    site_label=label,
                    element_id=chart_id(f"mini-{truck.code}", site.code),
                    small=True,
                ),
                "has_level": any(v is not None for _, v in levels.days),
            }
        )
    if plan is None:  # the truck's own notice says it; one per site would only repeat it
        notices = [n for n in notices if _as_dict(n)["kind"] != "no_active_plan" or _as_dict(n)["site"] is None]
    warnings = [dict(w, truck=truck.code) for w in _group_readings(_dedupe(notices), truck)]
    gap = float(plan.gap) * 100 if plan is not None and plan.gap is not None else None
    return {"truck": truck, "view": view, "plan": plan, "gap": gap, "charts": charts, "warnings": warnings}


def _group_readings(notices: list[dict[str, Any]], truck: Truck) -> list[dict[str, Any]]:
    """Several "no recent reading" notices of one truck become one line naming the sites."""
    missing = [n for n in notices if n["kind"] == "no_recent_reading" and n["site"]]
    if len(missing) <= 2:
        return notices
    sites = [n["site"] for n in missing]
    merged = _notice(
        "no_recent_reading",
        f"{len(sites)} sites of truck {truck.code} have no recent reading; "
        "their levels and quantities follow the plan, not a gauge:",
    )
    merged["sites"] = sites
    out = [n for n in notices if n not in missing]
    out.append(merged)
    return out


def _notice(kind: str, message: str, site: str | None = None, date: dt.date | None = None) -> Any:
    return {"kind": kind, "message": message, "site": site, "date": date}


def _as_dict(notice: Any) -> dict[str, Any]:
    if isinstance(notice, dict):
        return notice
    return {"kind": notice.kind, "message": notice.message, "site": notice.site, "date": notice.date}


def _dedupe(notices: Any) -> list[dict[str, Any]]:
    seen, out = set(), []
    for notice in map(_as_dict, notices):
        key = (notice["kind"], notice["site"], notice["date"])
        if key not in seen:
            seen.add(key)
            out.append(notice)
    return out


def _sorted_warnings(notices: list[dict[str, Any]]) -> list[dict[str, Any]]:
    def key(notice: dict[str, Any]) -> tuple[Any, ...]:
        order = NOTICE_KINDS.get(notice["kind"], (notice["kind"], 9))[1]
        return (order, notice["date"] or dt.date.max, notice.get("truck") or "", notice["site"] or "")

    return [
        dict(n, label=NOTICE_KINDS.get(n["kind"], (n["kind"].replace("_", " ").capitalize(), 9))[0])
        for n in sorted(notices, key=key)
    ]


def init_app(app: Flask) -> None:
    app.register_blueprint(bp)
