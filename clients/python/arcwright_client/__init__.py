"""A client for the arcwright service over gRPC.

The stubs are generated from the service's own API file (proto/arcwright/v1/parser.proto) with
grpcio-tools the first time they are needed, into this package's `_generated` folder (or a
temporary folder when the package folder is read-only). What the client adds to them:

* batching: `parse_all` sends inputs `batch_size` at a time (one ParseBatch call each) and
  returns one result per input, in input order;
* deadlines: every call carries `deadline` seconds (sent to the service as grpc-timeout);
* retries: a call answered UNAVAILABLE (service starting or draining, replica gone behind a load
  balancer) or RESOURCE_EXHAUSTED (shedding load) is tried again after an exponentially growing
  wait, up to `attempts` times; every other error is raised at once.

    from arcwright_client import Client
    with Client("127.0.0.1:50051") as client:
        for sentence in client.parse_text("The pilot signed the manifest."):
            for token in sentence.tokens:
                print(token.id, token.form, token.head, token.label)
"""
import importlib
import os
import sys
import tempfile
import time
from dataclasses import dataclass
from pathlib import Path

import grpc

__all__ = ["Client", "Settings", "Refused", "RETRYABLE", "stubs", "write_conllu"]

RETRYABLE = (grpc.StatusCode.UNAVAILABLE, grpc.StatusCode.RESOURCE_EXHAUSTED)
_PROTO_ROOT = Path(__file__).resolve().parents[3] / "proto"
_PROTO_FILE = "arcwright/v1/parser.proto"


def stubs(proto_root=None):
    """The generated modules (parser_pb2, parser_pb2_grpc), generating them when missing."""
    root = Path(proto_root or os.environ.get("ARCWRIGHT_PROTO", _PROTO_ROOT))
    for out in (Path(__file__).parent / "_generated", Path(tempfile.gettempdir()) / "arcwright_client_generated"):
        if not (out / "arcwright" / "v1" / "parser_pb2_grpc.py").exists():
            try:
                out.mkdir(parents=True, exist_ok=True)
                from grpc_tools import protoc
                code = protoc.main(["protoc", f"-I{root}", f"--python_out={out}",
                                    f"--grpc_python_out={out}", str(root / _PROTO_FILE)])
                if code != 0:
                    raise RuntimeError(f"protoc failed on {root / _PROTO_FILE} (exit {code})")
            except PermissionError:
                continue
        if str(out) not in sys.path:
            sys.path.insert(0, str(out))
        return (importlib.import_module("arcwright.v1.parser_pb2"),
                importlib.import_module("arcwright.v1.parser_pb2_grpc"))
    raise RuntimeError("no writable folder for the generated stubs")


@dataclass
class Settings:
    model: str = ""            # empty: the service's default model
    decoder: str = ""          # "projective", "non-projective" or "" (the model's default)
    confidence: bool = False   # ask for per-arc confidences
    batch_size: int = 32       # inputs per ParseBatch call (the service's limit is 64 by default)
    deadline: float = 10.0     # seconds per call
    attempts: int = 5          # per batch, the first included
    backoff: float = 0.1       # seconds before the first retry, doubled after each
    max_backoff: float = 2.0


class Refused(Exception):
    """The service refused a batch, or kept refusing it after every attempt."""

    def __init__(self, first, end, attempts, error):
        self.first, self.end, self.attempts, self.code = first, end, attempts, error.code()
        super().__init__(f"batch of inputs {first}..{end}: {error.code().name}: {error.details()} "
                         f"(after {attempts} attempt(s))")


class Client:
    def __init__(self, address, settings=None, proto_root=None):
        self.settings = settings or Settings()
        self.pb, self.rpc = stubs(proto_root)
        self.channel = grpc.insecure_channel(address)
        self.stub = self.rpc.ParserStub(self.channel)
        self.model = None  # "name@version" of the model that answered last
        self.retries = 0   # attempts that were retried, over the client's life

    def __enter__(self):
        return self

    def __exit__(self, *exc):
        self.close()

    def close(self):
        self.channel.close()

    def _decoder(self):
        names = {"": "DECODER_UNSPECIFIED", "projective": "DECODER_PROJECTIVE",
                 "non-projective": "DECODER_NON_PROJECTIVE"}
        if self.settings.decoder not in names:
            raise ValueError(f"unknown decoder {self.settings.decoder!r}: use one of {sorted(names)}")
        return self.pb.Decoder.Value(names[self.settings.decoder])

    def _input(self, item):
        if isinstance(item, str):
            return self.pb.SentenceInput(text=item)
        return self.pb.SentenceInput(tokens=self.pb.TokenList(tokens=list(item)))

    def parse_all(self, inputs):
        """One result per input (a text string, or a list of tokens), each a list of parsed
        sentences, in input order."""
        inputs = list(inputs)
        size = max(1, self.settings.batch_size)
        results = []
        for first in range(0, len(inputs), size):
            results.extend(self._batch(first, inputs[first:first + size]))
        return results

    def parse_text(self, text):
        """The sentences of one text."""
        return self.parse_all([text])[0]

    def _batch(self, first, batch):
        request = self.pb.ParseBatchRequest(model=self.settings.model, decoder=self._decoder(),
                                            confidence=self.settings.confidence,
                                            sentences=[self._input(i) for i in batch])
        wait = self.settings.backoff
        attempts = max(1, self.settings.attempts)
        for attempt in range(1, attempts + 1):
            try:
                reply = self.stub.ParseBatch(request, timeout=self.settings.deadline)
                self.model = f"{reply.model.name}@{reply.model.version}"
                return [list(result.sentences) for result in reply.results]
            except grpc.RpcError as error:
                if error.code() in RETRYABLE and attempt < attempts:
                    self.retries += 1
                    time.sleep(wait)
                    wait = min(wait * 2, self.settings.max_backoff)
                    continue
                raise Refused(first, first + len(batch), attempt, error) from None
        raise AssertionError("the last attempt returns or raises")


def write_conllu(sentences, out, first_id=1):
    """Writes parsed sentences as CoNLL-U (# sent_id from first_id, # text = the forms); returns
    the next id."""
    for number, sentence in enumerate(sentences, first_id):
        out.write(f"# sent_id = {number}\n# text = {' '.join(t.form for t in sentence.tokens)}\n")
        for t in sentence.tokens:
            misc = f"ArcConfidence={t.confidence!r}" if t.HasField("confidence") else "_"
            out.write(f"{t.id}\t{t.form}\t_\t{t.tag}\t_\t_\t{t.head}\t{t.label}\t_\t{misc}\n")
        out.write("\n")
    return first_id + len(sentences)
