#!/usr/bin/env python3
"""A TLS front for a plaintext gRPC server, for the engine tests only.

    tls-relay.py LISTEN_PORT TARGET_PORT CERT KEY

Listens on 127.0.0.1:LISTEN_PORT, ends TLS there (certificate CERT with key KEY, ALPN h2, as
gRPC clients ask) and passes the bytes both ways to 127.0.0.1:TARGET_PORT. It stands in for the
TLS-terminating proxy that usually fronts a Spark Connect server, so that upshot's use_ssl=true
path is tested against a real handshake. Standard library only.
"""
import asyncio
import ssl
import sys


async def pipe(reader, writer):
    try:
        while data := await reader.read(65536):
            writer.write(data)
            await writer.drain()
    except (ConnectionError, ssl.SSLError):
        pass
    finally:
        try:
            writer.close()
        except Exception:
            pass


async def main(listen_port, target_port, cert, key):
    context = ssl.SSLContext(ssl.PROTOCOL_TLS_SERVER)
    context.load_cert_chain(cert, key)
    context.set_alpn_protocols(["h2"])

    async def serve(client_reader, client_writer):
        try:
            server_reader, server_writer = await asyncio.open_connection("127.0.0.1", target_port)
        except OSError:
            client_writer.close()
            return
        await asyncio.gather(pipe(client_reader, server_writer), pipe(server_reader, client_writer))

    server = await asyncio.start_server(serve, "127.0.0.1", listen_port, ssl=context)
    async with server:
        await server.serve_forever()


if __name__ == "__main__":
    if len(sys.argv) != 5:
        sys.exit("usage: tls-relay.py LISTEN_PORT TARGET_PORT CERT KEY")
    asyncio.run(main(int(sys.argv[1]), int(sys.argv[2]), sys.argv[3], sys.argv[4]))
