"""Parses a CoNLL-U or text file through a running arcwright service in batches and writes
CoNLL-U to stdout.

    python3 clients/python/examples/parse_file.py --grpc 127.0.0.1:50051 --input conllu test.conllu
    python3 clients/python/examples/parse_file.py --input text notes.txt > notes.conllu

CoNLL-U input: each sentence's word forms are sent as tokens (read with the `conllu` package).
Text input: each blank-line separated paragraph is sent as text; the service splits it into
sentences.
"""
import argparse
import signal
import sys
from pathlib import Path

sys.path.insert(0, str(Path(__file__).resolve().parents[1]))
from arcwright_client import Client, Refused, Settings, write_conllu  # noqa: E402


def main():
    # Piped into `head` and the like: end quietly when the reader goes away.
    signal.signal(signal.SIGPIPE, signal.SIG_DFL)
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("file", help="the file to parse")
    parser.add_argument("--input", choices=["conllu", "text"], default="conllu", help="what the file holds")
    parser.add_argument("--grpc", default="127.0.0.1:50051", help="the service (or load balancer) address")
    parser.add_argument("--model", default="", help="model name (default: the service's default)")
    parser.add_argument("--decoder", choices=["projective", "non-projective"], default="", help="default: the model's")
    parser.add_argument("--confidence", action="store_true", help="add ArcConfidence=P to MISC")
    parser.add_argument("--batch", type=int, default=32, help="inputs per call")
    parser.add_argument("--deadline", type=float, default=10.0, help="seconds per call")
    parser.add_argument("--attempts", type=int, default=5, help="attempts per batch when unavailable or shedding")
    args = parser.parse_args()
    text = Path(args.file).read_text(encoding="utf-8")
    if args.input == "conllu":
        import conllu
        inputs = [[t["form"] for t in s if isinstance(t["id"], int)] for s in conllu.parse(text)]
    else:
        inputs = [p.strip() for p in text.split("\n\n") if p.strip()]
    settings = Settings(model=args.model, decoder=args.decoder, confidence=args.confidence,
                        batch_size=args.batch, deadline=args.deadline, attempts=args.attempts)
    with Client(args.grpc, settings) as client:
        try:
            results = client.parse_all(inputs)
        except Refused as e:
            print(f"parse_file: {e}", file=sys.stderr)
            return 1
        next_id = 1
        for sentences in results:
            next_id = write_conllu(sentences, sys.stdout, next_id)
        print(f"parse_file: {next_id - 1} sentences by {client.model} "
              f"({client.retries} retried attempts)", file=sys.stderr)
    return 0


if __name__ == "__main__":
    sys.exit(main())
