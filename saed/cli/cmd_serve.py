"""``saed serve``: a local web page that indexes each pattern as it is saved (docs/contract.md)."""

from __future__ import annotations

import dataclasses
import secrets
from pathlib import Path

from saed.cli.common import add_calibration_options, add_matching_options, add_phase_option, positive_float
from saed.errors import InputError

NAME = "serve"
HELP = "a local web page that indexes each pattern as it is saved into a folder, or opened on the page"
DESCRIPTION = (
    "Start a local web server with a page that stays open beside the acquisition software. Each pattern "
    "saved into the --watch folder (once completely written), or opened or dropped on the page, is indexed "
    "with tables built once at start. The page shows the pattern with its labelled spots (zoom, pan, hover), "
    "the ranked solutions, look-alike notes, tilt advice, the mistilt and the calibration; phases, "
    "calibration and voltage set on the page are remembered. It listens on 127.0.0.1 only, unless "
    "--allow-remote; nothing in the watched folder is modified or deleted. Stop it with Ctrl+C."
)
ORDER = 60
DEFAULT_PORT = 8750


def add_arguments(p):
    g = p.add_argument_group("server")
    g.add_argument("--host", default="127.0.0.1", metavar="ADDR",
                   help="address to listen on (default 127.0.0.1: this computer only; others need --allow-remote)")
    g.add_argument("--port", type=int, default=DEFAULT_PORT, metavar="N",
                   help=f"port (default {DEFAULT_PORT}; 0: any free one)")
    g.add_argument("--watch", metavar="DIR", help="acquisition folder: index each new pattern saved into it")
    g.add_argument("--include-existing", action="store_true", help="also index the files already in --watch at start")
    g.add_argument("--open", action="store_true", help="open the page in the default browser")
    g.add_argument("--allow-remote", action="store_true",
                   help="allow a --host other than this computer; the URL then carries an access token")
    g.add_argument("--max-upload-mb", type=positive_float, default=256.0, metavar="MB",
                   help="largest pattern accepted from the page, MB (default 256)")
    g.add_argument("--forget", action="store_true", help="do not read or write the remembered page settings")
    g.add_argument("--units", choices=("nm", "angstrom"), default=None,
                   help="length unit of every spacing and scale the page shows (default: as last set on the "
                        "page, else nm; the page can switch it)")
    add_phase_option(p)
    add_calibration_options(p, center=False)
    add_matching_options(p)


def _check(args) -> Path | None:
    from saed.cli.common import matching_options_from_args

    matching_options_from_args(args)
    if not 0 <= args.port <= 65535:
        raise InputError(f"--port {args.port}: give 0 to 65535")
    loopback = args.host in ("127.0.0.1", "localhost", "::1")
    if not loopback and not args.allow_remote:
        raise InputError(f"--host {args.host}: other computers could reach the page; add --allow-remote "
                         "(the URL then carries an access token) or keep 127.0.0.1")
    if args.watch is None:
        return None
    d = Path(args.watch).expanduser()
    if not d.exists():
        raise InputError(f"--watch {args.watch}: no such folder")
    if not d.is_dir():
        raise InputError(f"--watch {args.watch}: not a folder")
    return d


def _initial_settings(args, book):
    from saed.serve.settings import Settings, load_settings, settings_from_fields

    s = Settings() if args.forget else load_settings(book)
    fields: dict = {}
    if args.phase:
        fields["phase"] = [p.name for p in book_phases(args)]
    if args.alpha_axis is not None:
        fields["alpha_axis"] = str(args.alpha_axis)
    if args.units is not None:
        fields["units"] = args.units
    if args.scale is not None or args.camera_length is not None:
        fields.update(scale=str(args.scale or ""), camera_length=str(args.camera_length or ""),
                      pixel_pitch=str(args.pixel_pitch or ""))
    if args.voltage is not None and not args.calibration:
        fields["voltage"] = str(args.voltage)
    if fields:
        s = settings_from_fields(fields, s, book, origin="command line")
    if args.calibration:
        s = dataclasses.replace(s, calibration_file=str(Path(args.calibration).resolve()), scale_inv_nm_per_px=None,
                                camera_length_mm=None, origin="command line")
        cal = s.calibration()
        if args.voltage is not None and abs(args.voltage - cal.voltage_kv) > 1e-6:
            raise InputError(f"--voltage {args.voltage:g} kV contradicts the calibration file's {cal.voltage_kv:g} kV")
        s = dataclasses.replace(s, voltage_kv=cal.voltage_kv)
    s.calibration()
    return s


def book_phases(args):
    from saed.cli.common import phases_from_args

    return phases_from_args(args)


def run(args) -> int:
    from saed.cli.common import matching_options_from_args
    from saed.serve.app import create_app
    from saed.serve.service import Service
    from saed.serve.guard import allowed_hosts
    from saed.serve.runner import bind_socket, serve_forever
    from saed.serve.settings import PhaseBook

    watch = _check(args)
    extra = [p for p in book_phases(args) if p.name not in _builtin_set()] if args.phase else []
    book = PhaseBook(extra)
    settings = _initial_settings(args, book)
    opts = matching_options_from_args(args)
    opts.pop("holder_alpha_axis_deg", None)
    sock = bind_socket(args.host, args.port)
    port = sock.getsockname()[1]
    token = secrets.token_urlsafe(18) if args.allow_remote else None
    service = Service(book=book, settings=settings, watch_dir=watch, top=args.top, options=opts,
                      include_existing=args.include_existing, remember=not args.forget, max_g_inv_nm=args.max_g)
    app = create_app(service, hosts=allowed_hosts(args.host, port), token=token, max_upload_mb=args.max_upload_mb)
    shown = f"[{args.host}]" if ":" in args.host else args.host
    url = f"http://{shown}:{port}/" + (f"?token={token}" if token else "")
    print(f"saed serve: {url}" + (f"  (watching {watch})" if watch else "") + "  - Ctrl+C to stop", flush=True)
    if args.open:
        import webbrowser

        webbrowser.open(url)
    try:
        serve_forever(app, sock)
    except KeyboardInterrupt:
        pass
    print("saed serve: stopped", flush=True)
    return 0


def _builtin_set():
    from saed.crystal.phase import builtin_names

    return set(builtin_names())
