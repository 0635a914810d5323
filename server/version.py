"""The software version recorded in evaluation records and shown in the API."""

VERSION = "0.2.0"
