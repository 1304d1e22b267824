"""Recording writer, recording reader, paced player and offline apply for tunetrace."""
