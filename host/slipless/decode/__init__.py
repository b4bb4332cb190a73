"""Bytes to records: the deframer, frame layouts, the streaming decoder, the
decode sink (tables) and the compact channel store."""
