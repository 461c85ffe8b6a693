"""The console's screens: JogScreen (the main one) and ConfirmMoveScreen (the modal)."""
