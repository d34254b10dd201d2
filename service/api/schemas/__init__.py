"""marshmallow 4 schemas of the API."""
