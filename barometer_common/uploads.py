"""Refuse an oversized upload before its file is streamed to disk.

Django's default handlers write the whole multipart body to memory or a temporary file before a view can
look at ``upload.size``. :class:`UploadSizeLimitHandler` runs first (``FILE_UPLOAD_HANDLERS``): it reads the
request's declared ``Content-Length`` and, when that exceeds ``BAROMETER_MAX_UPLOAD_BYTES`` plus a margin for
the multipart framing, stops the parse at the first file part with
``StopUpload(connection_reset=True)``, so the rest of the body is never read. The small form fields sent
before the file (the CSRF token among them) are still parsed, and the refusal is recorded on the request
(``request.upload_refused``, a :class:`RefusedUpload`) so the view can say what happened.

Why not stop in ``handle_raw_input``: Django calls it outside the loop that catches ``StopUpload``, so an
exception there escapes as a server error (and the CSRF token is never read).

The API views check ``Content-Length`` themselves before touching the body and answer 413
(``ingest/api/views.py: upload_size_check``); this handler adds nothing there but the early stop.
"""

from __future__ import annotations

from dataclasses import dataclass

from django.conf import settings
from django.core.files.uploadhandler import FileUploadHandler, StopUpload

#: Room for the multipart boundaries, part headers and small form fields around the file itself.
MULTIPART_OVERHEAD_BYTES = 64 * 1024
REFUSED_ATTRIBUTE = "upload_refused"


@dataclass(frozen=True)
class RefusedUpload:
    """An upload stopped before its file was read: the first file's name, the request size, the limit."""

    name: str
    size: int
    limit: int


class UploadSizeLimitHandler(FileUploadHandler):
    """Stops a multipart upload whose declared length is over the limit before any file data is stored."""

    def handle_raw_input(self, input_data, META, content_length, boundary, encoding=None):
        self.limit = int(settings.BAROMETER_MAX_UPLOAD_BYTES)
        self.declared = int(content_length or 0)
        self.too_large = self.declared > self.limit + MULTIPART_OVERHEAD_BYTES
        return None  # let Django's parser go on; new_file() stops it at the first file

    def new_file(self, field_name, file_name, *args, **kwargs) -> None:
        if getattr(self, "too_large", False):
            if self.request is not None:
                refused = RefusedUpload(name=str(file_name or field_name), size=self.declared, limit=self.limit)
                setattr(self.request, REFUSED_ATTRIBUTE, refused)
            raise StopUpload(connection_reset=True)

    def receive_data_chunk(self, raw_data, start):
        return raw_data  # under the limit: the next handler stores the data

    def file_complete(self, file_size):
        return None


def upload_refused(request) -> RefusedUpload | None:
    """The refusal recorded while parsing this request's body, if any (read ``request.FILES`` first)."""
    return getattr(request, REFUSED_ATTRIBUTE, None)
