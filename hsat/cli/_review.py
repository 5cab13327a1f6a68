"""``hsat review`` (the browser review of one study) and ``hsat rescore``."""

from __future__ import annotations

import threading
import webbrowser

import click


@click.command("review")
@click.argument("study_dir", type=click.Path(file_okay=False, path_type=str))
@click.option("--no-browser", is_flag=True,
              help="Do not open a browser; only print the page's address.")
@click.option("--idle-minutes", type=click.FloatRange(min=0.5, max=24 * 60), default=30.0,
              show_default=True, help="Stop the server after this long without use.")
@click.option("--recording", type=click.Path(dir_okay=False, path_type=str), default=None,
              help="The night's EDF, when it is no longer where the study says.")
@click.option("--reviewer", default=None,
              help="Name put in the edit log (the page lets you change it).")
def review(study_dir: str, no_browser: bool, idle_minutes: float, recording: str | None,
           reviewer: str | None) -> None:
    """Review STUDY_DIR's signals and events in the browser, then rescore and sign.

    Starts a server on 127.0.0.1 (a free port) that only answers requests carrying this
    study's random token, and prints the page's address. Every edit is appended to
    review-edits.jsonl; events.csv is never changed. The server stops on "Finish",
    after the idle time, or on Ctrl+C.
    """
    from hsat.review import open_review, start_server

    click.echo("hsat review: reading and conditioning the night ...", err=True)
    session = open_review(study_dir, recording=recording, reviewer=reviewer)
    server, thread = start_server(session, idle_minutes=idle_minutes)
    click.echo(server.url)
    click.echo(f"hsat review: serving {session.folder.name}; stops after {idle_minutes:g} "
               "idle minutes, on Finish, or on Ctrl+C", err=True)
    if not no_browser:
        # In a thread: a console browser (found when there is no display) would otherwise
        # hold this terminal until it quits.
        threading.Thread(target=_open_browser, args=(server.url,), daemon=True).start()
    try:
        while thread.is_alive():
            thread.join(timeout=0.5)
    except KeyboardInterrupt:
        server.request_stop()
        thread.join(timeout=5)
    finally:
        server.server_close()
    click.echo("hsat review: stopped", err=True)


def _open_browser(url: str) -> None:
    try:
        if not webbrowser.open(url, new=2):
            click.echo("hsat review: no browser found; open the address above", err=True)
    except webbrowser.Error:
        click.echo("hsat review: no browser found; open the address above", err=True)


@click.command("rescore")
@click.argument("study_dir", type=click.Path(file_okay=False, path_type=str))
@click.option("--recording", type=click.Path(dir_okay=False, path_type=str), default=None,
              help="The night's EDF, when it is no longer where the study says.")
def rescore(study_dir: str, recording: str | None) -> None:
    """Recompute STUDY_DIR's indices from its reviewed events (the edit log).

    Writes events-reviewed.csv and a new summary.json with a "review" object; the
    automatic summary is kept as summary-auto.json and events.csv is not changed.
    """
    from hsat.review import rescore_study

    summary = rescore_study(study_dir, recording=recording)
    review_facts = summary.get("review", {})
    lines = [f"hsat rescore: {review_facts.get('edited_count', 0)} event(s) edited "
             f"({review_facts.get('rejected', 0)} rejected, {review_facts.get('added', 0)} "
             f"added, {review_facts.get('retyped', 0)} retyped, "
             f"{review_facts.get('adjusted', 0)} moved)"]
    for name, idx in summary.get("indices", {}).items():
        lines.append(f"  {name}: REI {idx.get('rei')} /h ({idx.get('severity', '')})")
    click.echo("\n".join(lines))
    for note in summary.get("notes", []):
        if note.startswith("Rescored with a different analysis"):
            click.echo(f"hsat: warning: {note}", err=True)
