"""Documented refusals shared by the API routes."""

from server import schemas

# Every refusal the API can give, documented once for every route.
ERRORS = {
    400: {"model": schemas.ErrorOut, "description": "A body that cannot be read at all (not JSON, broken multipart)."},
    401: {"model": schemas.ErrorOut, "description": "Not authenticated: the token is missing, expired or revoked."},
    403: {"model": schemas.ErrorOut, "description": "Authenticated, but without the role this needs."},
    404: {"model": schemas.ErrorOut, "description": "No such record."},
    409: {"model": schemas.ErrorOut, "description": "A stale edit, or a record that cannot change now."},
    422: {"model": schemas.UnprocessableOut, "description": "Input that breaks a rule; nothing was stored."},
}
# For uploads: the same 422 body, described for files.
FILE_REFUSED = {422: {"model": schemas.UnprocessableOut,
                      "description": "The file or a field cannot be used: problems name rows and columns; nothing was stored."}}
