"""The watch: survey alerts in, notices out, for a list of lenses prepared ahead.

:class:`Watch` reads each new alert file of a folder once (:mod:`lensdelay.io.alert_files`;
a file must arrive whole, moved into the folder, as spool folders are fed),
finds the watched lenses whose footprint holds each alert and the image it most probably
is (:mod:`lensdelay.forecast.watchlist`), forecasts every image from the prepared lens
with the alert as the detection, and writes the notices (:mod:`lensdelay.io.notices`):

* the first alert of a transient at an observed image: a forecast and a ``first`` notice
  (the alert as the detection; or, when the prepared scenario already holds a detection
  of that family from before, as a sighting of that event);
* a later alert of it (the survey's ``object_id`` ties them) at another observed image:
  the forecast again with that sighting, and an ``update`` citing the earlier notices;
* a later alert at none of the lens's images (that hypothesis above one half): a
  ``retraction`` — the match was wrong;
* an alert at a predicted image or at none, with no notice issued yet: recorded and
  logged as a possible unknown image or foreground transient, no notice.

The state (:mod:`lensdelay.io.watch_state`) is committed after each alert, so a restart
resumes without losing an alert or issuing a notice twice. Logging goes to a function the
caller gives (the command line prints one line per event).
"""

from __future__ import annotations

import datetime as _dt
from pathlib import Path

from lensdelay.errors import InputError, LensdelayError

__all__ = ["DETECTION_SIGMA_DAYS", "ALERT_SIGMA_ARCSEC", "Watch"]

#: The date error (days) given to an alert's detection in the forecasts: when the event
#: reached the image is known to about a day from one detection (common practice).
DETECTION_SIGMA_DAYS = 1.0
#: An alert's 1-σ position error (arcsec) unless told otherwise (a survey's typical
#: astrometry for a faint transient, common practice).
ALERT_SIGMA_ARCSEC = 0.05


def _now_iso() -> str:
    return _dt.datetime.now(_dt.timezone.utc).strftime("%Y-%m-%dT%H:%M:%SZ")


class Watch:
    """A watch over the prepared lenses of ``lenses``, writing into ``out``.

    Parameters
    ----------
    lenses : path
        A folder of prepared lenses (``lensdelay prepare``), each with a ``[sky]`` origin.
    alerts : path
        The folder the alert files arrive in (``.avro``, ``.csv``, ``.jsonl``).
    out : path
        Notices, forecasts and the state (``watch.sqlite``, ``watch.lock``).
    fields : dict, optional
        Renamed alert fields (meaning -> the files' names).
    samples : int
        Forecast samples per notice.
    log : callable
        Receives one line per event (a file read, a match, a notice, a problem).
    """

    def __init__(
        self, lenses, alerts, out, *, fields=None, samples=20000, alert_sigma=None, log=print
    ):
        from lensdelay.forecast.watchlist import WatchIndex, watched_lens
        from lensdelay.io.catalogue import list_systems
        from lensdelay.io.prepared_files import is_prepared, read_prepared
        from lensdelay.io.watch_state import WatchState

        self.alerts_folder = Path(alerts)
        if not self.alerts_folder.is_dir():
            raise InputError(f"--alerts must be a folder of alert files, got {str(alerts)!r}")
        self.prepared, watched = {}, []
        for name, path in list_systems(lenses):
            if not is_prepared(path):
                raise InputError(
                    "must hold prepared lenses only (lensdelay prepare SCENARIO --out DIR), "
                    f"got the scenario file {path.name}",
                    str(lenses),
                )
            self.prepared[name] = read_prepared(path)
            watched.append(watched_lens(name, self.prepared[name]))
        self.index = WatchIndex(watched)
        self.out = Path(out)
        self.state = WatchState(self.out)
        self.fields, self.samples, self.log = fields, samples, log
        self.alert_sigma = ALERT_SIGMA_ARCSEC if alert_sigma is None else alert_sigma
        _load_forecast_path()
        self.log(f"watching {len(watched)} lenses of {lenses} for alerts in {alerts}")

    def close(self) -> None:
        """Release the state and its lock."""
        self.state.close()

    def poll(self, stop=None) -> int:
        """Read every alert file not read before (oldest name first); the alerts acted on."""
        from lensdelay.io.alert_files import ALERT_SUFFIXES, read_alert_file

        done = 0
        for path in sorted(self.alerts_folder.iterdir()):
            if stop is not None and stop.requested:
                break
            if path.suffix.lower() not in ALERT_SUFFIXES or self.state.file_read(path.name):
                continue
            batch = read_alert_file(path, self.fields)
            for line in batch.problems:
                self.log(line)
            done += self._alerts(batch.alerts, stop)
            if stop is not None and stop.requested:
                break  # the file is read again next time; its recorded alerts are skipped
            self.state.mark_file(path.name, _now_iso(), len(batch.alerts), len(batch.problems))
            self.log(f"{path.name}: {len(batch.alerts)} alerts read")
        return done

    def _alerts(self, alerts, stop=None) -> int:
        import numpy as np

        from lensdelay.forecast.watchlist import assign

        if not alerts:
            return 0
        i_alert, i_lens, _ = self.index.candidates(
            np.array([a.ra for a in alerts]), np.array([a.dec for a in alerts])
        )
        acted = 0
        for ia, il in sorted(zip(i_alert.tolist(), i_lens.tolist())):
            if stop is not None and stop.requested:
                break
            alert, lens = alerts[ia], self.index.lenses[il]
            if self.state.alert_seen(alert.alert_id, lens.name):
                continue
            assignment = assign(lens, alert.ra, alert.dec, self.alert_sigma)
            try:
                self._act(alert, lens, assignment)
            except LensdelayError as err:
                # one alert's failure (a forecast that cannot be made) never stops the watch
                self.log(f"alert {alert.alert_id} in {lens.name}: no notice ({err})")
                self.state.record(alert, assignment, alert.object_id or alert.alert_id)
            acted += 1
        return acted

    def _observed(self, lens, image) -> bool:
        return image is not None and any(
            f"{im.family}/{im.label}" == image and im.observed for im in lens.images
        )

    def _act(self, alert, lens, assignment) -> None:
        """What one alert in one lens's footprint leads to (module docstring)."""
        key = alert.object_id or alert.alert_id
        known = self.state.transient(lens.name, key)
        where = assignment.image or "none of its images"
        if known is None:
            if not self._observed(lens, assignment.image):
                self.log(
                    f"alert {alert.alert_id} lies in {lens.name} at {where} (no observed image; "
                    f"P(none) {assignment.probabilities['none']:.2f}): a possible unknown image "
                    "or a foreground transient; no notice"
                )
                self.state.record(alert, assignment, key)
                return
            if self._holds_detection(lens.name, assignment.image, alert.mjd):
                # the lens already holds a detection of this family: the alert is that
                # event again (in its image) or a sighting of it in another (the forecast's
                # tension check says when it does not fit)
                tr = self.prepared[lens.name].scenario.transient
                own = assignment.image == f"{tr.family}/{tr.seen_in}"
                sighted = None if own else assignment.image
                forecast = self._forecast(lens.name, None, None, alert.mjd, sighted)
            else:
                forecast = self._forecast(lens.name, assignment.image, alert.mjd, alert.mjd, None)
            self._issue("first", 1, alert, assignment, key, forecast, [], None, first=True)
            return
        if known.retracted:
            self.state.record(alert, assignment, key)
            return
        cites = self.state.notices_of(lens.name, key)
        if assignment.image is None and assignment.probabilities["none"] > 0.5:
            reason = (
                f"alert {alert.alert_id} of the same transient lies at none of {lens.name}'s "
                "images: the match was wrong"
            )
            self._issue(
                "retraction", known.sequence + 1, alert, assignment, key, None, cites, reason
            )
            return
        if self._observed(lens, assignment.image) and assignment.image != known.first_image:
            first = known.first_image
            if self._holds_detection(lens.name, first, known.first_mjd):
                first = None  # as in the first notice: the lens's own detection
            forecast = self._forecast(
                lens.name, first, known.first_mjd, alert.mjd, assignment.image
            )
            self._issue("update", known.sequence + 1, alert, assignment, key, forecast, cites, None)
            return
        self.log(f"alert {alert.alert_id}: {key} again in {lens.name} at {where}; no new notice")
        self.state.record(alert, assignment, key)

    def _holds_detection(self, name, image, mjd) -> bool:
        """Whether the prepared scenario holds a detection of ``image``'s family before ``mjd``."""
        tr = self.prepared[name].scenario.transient
        return tr is not None and image.partition("/")[0] == tr.family and tr.date.mjd < mjd

    def _forecast(self, name, image, first_mjd, now_mjd, sighted):
        """forecast.json of lens ``name`` as of ``now_mjd``.

        The transient first seen in ``image`` at ``first_mjd`` (None: the prepared
        scenario's own detection), and seen in ``sighted`` at ``now_mjd`` when given.
        """
        from astropy import units as u
        from astropy.time import Time

        from lensdelay.api import forecast_prepared
        from lensdelay.io.forecast_files import forecast_json

        seen = []
        if sighted is not None:
            when = Time(now_mjd, format="mjd", scale="utc").isot
            seen = [f"{sighted}={when}±{DETECTION_SIGMA_DAYS:g}"]
        # "now" is the latest alert, a second on: the dates written in ISO are rounded
        # to the millisecond, and a sighting must not lie after now
        now = Time(Time(now_mjd, format="mjd", scale="utc").isot, scale="utc") + 1.0 * u.s
        detection = None  # the prepared scenario's own [transient]
        if image is not None:
            first = Time(first_mjd, format="mjd", scale="utc").isot
            detection = f"{image}={first}±{DETECTION_SIGMA_DAYS:g}"
        res = forecast_prepared(
            self.prepared[name],
            detection,
            now=now,
            seen=seen,
            n_samples=self.samples,
            budget=False,
        )
        return forecast_json(res)

    def _issue(self, role, sequence, alert, assignment, key, forecast, cites, reason, first=False):
        """Write the notice (JSON and VOEvent) and the forecast, then commit the alert."""
        from lensdelay.io.notices import notice, voevent_xml
        from lensdelay.io.storage import atomic_write_json
        from lensdelay.atomic import atomic_write_bytes

        doc = notice(
            role=role,
            sequence=sequence,
            issued=_now_iso(),
            alert=alert,
            assignment=assignment,
            forecast=forecast,
            transient=key,
            cites=cites,
            reason=reason,
        )
        folder = self.out / "notices" / assignment.lens / _safe(key)
        folder.mkdir(parents=True, exist_ok=True)
        stem = folder / f"{sequence:03d}-{role}"
        if forecast is not None:
            atomic_write_json(stem.with_name(stem.name + "-forecast.json"), forecast)
        atomic_write_bytes(stem.with_suffix(".xml"), voevent_xml(doc))
        atomic_write_json(stem.with_suffix(".json"), doc)
        first_seen = (assignment.image, alert.mjd) if first else None
        self.state.record(alert, assignment, key, doc, stem.with_suffix(".json"), first_seen)
        self.log(
            f"{role} notice {sequence} for {key} in {assignment.lens} ({assignment.image or 'none'}"
            f", P = {assignment.probability:.2f}): {stem.with_suffix('.json')}"
        )


def _load_forecast_path() -> None:
    """Import what a forecast and a notice need, before the first alert arrives.

    A watch waits for alerts; paying the imports (the forecast's modules, astropy's
    cosmology and time scales, the notices' XML) now, not when an alert is in hand,
    takes about half a second off its first notice.
    """
    import astropy.cosmology  # noqa: F401
    import astropy.time  # noqa: F401

    import lensdelay.api  # noqa: F401
    import lensdelay.forecast.pipeline  # noqa: F401
    import lensdelay.io.forecast_files  # noqa: F401
    import lensdelay.io.notices  # noqa: F401


def _safe(name: str) -> str:
    """A transient's name as a folder name.

    Anything but letters, digits, '-', '_' and '.' becomes '_'.
    """
    return "".join(c if c.isalnum() or c in "-_." else "_" for c in name)
