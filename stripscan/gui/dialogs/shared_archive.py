"""The form that names a shared archive on a PostgreSQL server: its connection fields, or one used before.

The form only builds the connection string, in libpq's own form
(:func:`stripscan.gui.models.location.server_location`); the window opens
it in a worker thread.  There is no password field: a password comes from
the user's ``.pgpass`` file or ``PGPASSWORD``, as for every libpq program,
and the window never stores one.
"""

from __future__ import annotations

from collections.abc import Sequence

from PySide6.QtCore import Signal
from PySide6.QtWidgets import (
    QComboBox,
    QDialog,
    QDialogButtonBox,
    QFormLayout,
    QLabel,
    QLineEdit,
    QListWidget,
    QRadioButton,
    QSpinBox,
    QVBoxLayout,
    QWidget,
)

from stripscan.gui.dialogs.lot_choice import caution_label
from stripscan.gui.models.location import SSL_MODES, server_location

__all__ = ["SharedArchiveDialog", "PASSWORD_WORDS"]

#: Where the password comes from, said in the form.
PASSWORD_WORDS = ("stripscan never asks for a password and never stores one. The server's password is read from "
                  "your .pgpass file (on Windows %APPDATA%\\postgresql\\pgpass.conf) or from the PGPASSWORD "
                  "environment variable, as for every PostgreSQL program; ask whoever looks after the server.")


class SharedArchiveDialog(QDialog):
    """Name a shared archive: host, port, database and user, or a service of ``pg_service.conf``; or a recent one.

    Parameters
    ----------
    recent : sequence of str
        Connection strings of the shared archives opened before, newest first.
    parent : QWidget, optional

    Signals
    -------
    chosen(str)
        The connection string to open.
    """

    chosen = Signal(str)

    def __init__(self, recent: Sequence[str] = (), parent: QWidget | None = None) -> None:
        super().__init__(parent)
        self.setWindowTitle("Open a shared archive")
        intro = QLabel("A lot archive kept on a PostgreSQL server, shared by the group. Whoever looks after the "
                       "server gives you its address, the database's name and your login (or a service name).")
        intro.setWordWrap(True)
        self.by_fields = QRadioButton("Server, database and login")
        self.by_service = QRadioButton("A service named in pg_service.conf")
        self.by_fields.setChecked(True)
        self.host = QLineEdit()
        self.host.setPlaceholderText("localhost (a folder such as /run/postgresql for a local socket)")
        self.port = QSpinBox()
        self.port.setRange(1, 65535)
        self.port.setValue(5432)
        self.database = QLineEdit()
        self.database.setPlaceholderText("the archive's database")
        self.user = QLineEdit()
        self.user.setPlaceholderText("your login on the server (default: your own user name)")
        self.service = QLineEdit()
        self.service.setPlaceholderText("a name in pg_service.conf")
        self.sslmode = QComboBox()
        self.sslmode.addItems(list(SSL_MODES))
        self.sslmode.setToolTip("How the connection is encrypted and the server checked (libpq's sslmode); "
                                "prefer: encrypted when the server offers it")
        form = QFormLayout()
        form.addRow(self.by_fields)
        form.addRow("Server:", self.host)
        form.addRow("Port:", self.port)
        form.addRow("Database:", self.database)
        form.addRow("Login:", self.user)
        form.addRow(self.by_service)
        form.addRow("Service:", self.service)
        form.addRow("Encryption (sslmode):", self.sslmode)
        self.result_line = QLabel()
        self.result_line.setWordWrap(True)
        self.result_line.setStyleSheet("color: #37474f")
        self.problem = QLabel()
        self.problem.setWordWrap(True)
        self.problem.setStyleSheet("color: #b71c1c")
        password = QLabel(PASSWORD_WORDS)
        password.setWordWrap(True)
        self.recent = QListWidget()
        self.recent.addItems(list(recent))
        self.recent.setMaximumHeight(110)
        self.recent.setToolTip("Double-click to open it again")
        self.recent.itemDoubleClicked.connect(lambda item: self._choose(item.text()))
        self.recent.itemSelectionChanged.connect(self._update)
        self.buttons = QDialogButtonBox(QDialogButtonBox.StandardButton.Ok | QDialogButtonBox.StandardButton.Cancel)
        self.buttons.button(QDialogButtonBox.StandardButton.Ok).setText("Open")
        self.buttons.accepted.connect(self.accept)
        self.buttons.rejected.connect(self.reject)
        layout = QVBoxLayout(self)
        layout.addWidget(intro)
        layout.addLayout(form)
        layout.addWidget(self.result_line)
        layout.addWidget(password)
        layout.addWidget(QLabel("Opened before (double-click to open):" if recent else "No shared archive opened yet."))
        if recent:
            layout.addWidget(self.recent)
        else:
            self.recent.hide()
        layout.addWidget(self.problem)
        layout.addWidget(caution_label())
        layout.addWidget(self.buttons)
        for edit in (self.host, self.database, self.user, self.service):
            edit.textEdited.connect(self._typed)
        self.port.valueChanged.connect(self._typed)
        self.sslmode.currentIndexChanged.connect(self._typed)
        self.by_fields.toggled.connect(self._typed)
        self._update()
        self.resize(560, self.sizeHint().height())

    def _typed(self, *_: object) -> None:
        self.recent.clearSelection()  # what is typed counts, not a line picked before
        self._update()

    def _update(self) -> None:
        fields = self.by_fields.isChecked()
        for widget in (self.host, self.port, self.database, self.user):
            widget.setEnabled(fields)
        self.service.setEnabled(not fields)
        self.problem.clear()
        try:
            self.result_line.setText(f"Connection: {self.location()}")
        except ValueError as exc:
            self.result_line.setText(f"Connection: not complete yet ({exc})")

    def location(self) -> str:
        """The connection string the form names (a recent one picked, else the fields').

        Raises
        ------
        ValueError
            When the fields do not name an archive yet.
        """
        picked = self.recent.selectedItems()
        if picked:
            return picked[0].text()
        if self.by_service.isChecked():
            if not self.service.text().strip():
                raise ValueError("name the service")
            return server_location(service=self.service.text(), sslmode=self.sslmode.currentText())
        return server_location(host=self.host.text(), port=self.port.value(), database=self.database.text(),
                               user=self.user.text(), sslmode=self.sslmode.currentText())

    def _choose(self, location: str) -> None:
        self.chosen.emit(location)
        super().accept()

    def accept(self) -> None:
        try:
            location = self.location()
        except ValueError as exc:
            self.problem.setText(f"Not opened: {exc}.")
            return
        self._choose(location)
