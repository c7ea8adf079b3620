using System.Buffers.Binary;

namespace Bitbudget.Search.Tests.Fuzz;

/// <summary>
/// Seeded, deterministic mutations of a seed file, the kinds coverage-guided fuzzers apply blind: bit flips,
/// interesting byte and integer values, inserted, deleted and duplicated ranges, small changes to what may be
/// a length field (protobuf varints, little-endian sizes), and splices with another seed. The same seed and
/// input always give the same mutant, so a failure reproduces from its execution number alone.
/// </summary>
internal sealed class Mutator(int seed)
{
    private static readonly byte[] InterestingBytes = [0x00, 0x01, 0x7F, 0x80, 0xFF, 0x93, (byte)'P', (byte)'K'];
    private static readonly long[] InterestingIntegers = [0, -1, 1, int.MaxValue, int.MinValue, 1L << 31, 1L << 32, long.MaxValue, 0xFFFF, 0x10000];

    private readonly Random random = new(seed);

    /// <summary>One to four stacked mutations of <paramref name="input"/>; <paramref name="other"/> feeds splices.</summary>
    public byte[] Mutate(byte[] input, byte[] other)
    {
        var bytes = new List<byte>(input);
        var rounds = 1 + random.Next(4);
        for (var r = 0; r < rounds; r++)
        {
            if (bytes.Count == 0)
            {
                bytes.Add((byte)random.Next(256));
                continue;
            }

            var at = random.Next(bytes.Count);
            switch (random.Next(9))
            {
                case 0:
                    bytes[at] ^= (byte)(1 << random.Next(8));
                    break;
                case 1:
                    bytes[at] = InterestingBytes[random.Next(InterestingBytes.Length)];
                    break;
                case 2:
                    // A protobuf varint or a one-byte length: nudge it by a little.
                    bytes[at] = (byte)(bytes[at] + random.Next(-8, 9));
                    break;
                case 3:
                    WriteInteger(bytes, at, InterestingIntegers[random.Next(InterestingIntegers.Length)], random.Next(2) == 0 ? 4 : 8);
                    break;
                case 4:
                    bytes.InsertRange(at, Enumerable.Range(0, 1 + random.Next(16)).Select(_ => (byte)random.Next(256)));
                    break;
                case 5:
                    bytes.RemoveRange(at, Math.Min(bytes.Count - at, 1 + random.Next(32)));
                    break;
                case 6:
                    var length = Math.Min(bytes.Count - at, 1 + random.Next(64));
                    bytes.InsertRange(random.Next(bytes.Count), bytes.GetRange(at, length));
                    break;
                case 7:
                    if (other.Length > 0)
                    {
                        // Splice: this seed's head, the other seed's tail.
                        var from = random.Next(other.Length);
                        bytes.RemoveRange(at, bytes.Count - at);
                        bytes.AddRange(other.AsSpan(from).ToArray());
                    }

                    break;
                default:
                    // A varint-encoded length made long: 0xFF 0xFF 0xFF 0xFF 0x0F claims about 4 GiB.
                    bytes.InsertRange(at, [0xFF, 0xFF, 0xFF, 0xFF, 0x0F]);
                    break;
            }
        }

        return [.. bytes];
    }

    private static void WriteInteger(List<byte> bytes, int at, long value, int width)
    {
        Span<byte> buffer = stackalloc byte[8];
        BinaryPrimitives.WriteInt64LittleEndian(buffer, value);
        for (var i = 0; i < width && at + i < bytes.Count; i++)
        {
            bytes[at + i] = buffer[i];
        }
    }
}
