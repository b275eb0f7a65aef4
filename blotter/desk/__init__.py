"""The desk's use cases, headless: what the app and the command line both call.

``session`` loads and values a book (trial trades layered on), ``limits`` applies the desk's
limits and finds what expires this week, ``close_review`` lists the marks in force beside the last
close and writes the close, ``trials`` holds trades layered in memory, ``entry`` reads and writes
what a person types. Nothing here knows a terminal exists: no Textual, no Rich, no click.
"""
