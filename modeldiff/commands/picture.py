"""Draw a model's filter graph: `modeldiff graph MODEL [--format mermaid|dot|svg|text] [--setting ...]`.

The command's arguments and run; picture.py does the work.
"""

from __future__ import annotations

from modeldiff.picture import FORMATS, dot_of, mermaid_of, picture, resolve, role_picture, text_of


def configure(parser) -> None:
    parser.add_argument("model", metavar="MODEL", help="model file, NAME.model/ folder, or REV:PATH")
    parser.add_argument("--format", choices=FORMATS, default="mermaid")
    parser.add_argument("--setting", metavar="measure:NAME|report:NAME",
                        help="draw the links as they carry filters for one measure or report (default: the model's own links)")
    parser.add_argument("--security", action="store_true",
                        help="draw the security graph: the links row security travels (security_flow, no standby)")
    parser.add_argument("--role", metavar="ROLE",
                        help="the security graph with one role's reach: the tables it filters and restricts, "
                             "the links its filters travel")


def run(args, stdout) -> int:
    from modeldiff.compare import read_model

    from modeldiff.errors import UsageError

    if args.setting is not None and (args.security or args.role is not None):
        raise UsageError("--setting draws filters for a measure or report; --security and --role draw row "
                         "security, which no setting changes: give one or the other")
    _, result = read_model(args.model)
    model = result.model
    if args.role is not None:
        pic = role_picture(model, args.role)
    elif args.security:
        pic = picture(model, setting_label="security graph", security=True)
    else:
        setting, label = resolve(model, args.setting)
        what, _, name = (args.setting or "").partition(":")
        pic = picture(model, setting=setting, setting_label=label,
                      report=model.reports[name] if what == "report" else None)
    if args.format == "dot":
        stdout.write(dot_of(pic))
    elif args.format == "svg":
        from modeldiff.render.svg import svg_of

        stdout.write(svg_of(pic, standalone=True) + "\n")
    elif args.format == "text":
        stdout.write(text_of(pic))
    else:
        stdout.write(mermaid_of(pic))
    return 0
