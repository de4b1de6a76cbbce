"""Sources of bytes: serial ports (and pyserial URLs), recordings to replay."""
