"""bendwise user interfaces: the Textual app and the line-mode command."""
