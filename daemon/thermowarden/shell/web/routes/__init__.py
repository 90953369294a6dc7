"""The web app's routes, as plain functions of the :class:`~thermowarden.shell.web.context.
WebContext` and the request, one module per part of the site: ``views`` (the HTML pages),
``api`` (the read API), ``sessions`` (signing in and out), ``commands`` (acknowledge,
shelve, unshelve from a page or the API). ``shell/web/app.py`` binds them to their paths."""
