"""Renderers of a stored report (its JSON dict and pictures): the PDF, plain text, and the tables and
differences the pages and the PDF show. They read a report; they never compute one."""
