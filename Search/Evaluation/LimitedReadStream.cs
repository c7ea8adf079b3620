namespace Bitbudget.Search.Evaluation;

/// <summary>
/// A read-only view of one inflating .npz member that counts the bytes it actually yields and stops
/// the read once they pass a cap or an absurd compression ratio, whatever the zip headers claimed.
/// </summary>
internal sealed class LimitedReadStream(Stream inner, string memberName, long maxBytes, long compressedBytes, double maxRatio, uint? expectedCrc = null) : Stream
{
    private uint crc;

    /// <summary>Below this many inflated bytes the ratio is not judged; tiny members compress wildly.</summary>
    internal const long RatioFloorBytes = 1L << 20;

    public long BytesRead { get; private set; }

    public override bool CanRead => true;

    public override bool CanSeek => false;

    public override bool CanWrite => false;

    public override long Length => throw new NotSupportedException();

    public override long Position
    {
        get => BytesRead;
        set => throw new NotSupportedException();
    }

    public override int Read(byte[] buffer, int offset, int count) => Read(buffer.AsSpan(offset, count));

    public override int Read(Span<byte> buffer)
    {
        int n = inner.Read(buffer);
        if (expectedCrc is not null)
            crc = Crc32.Append(crc, buffer[..n]);
        BytesRead += n;
        if (BytesRead > maxBytes)
            throw DatasetErrors.TooLarge(
                $"The .npz member '{memberName}' inflates past {DatasetErrors.FormatBytes(maxBytes)}, more than the dataset limits allow; send fewer samples.");
        if (BytesRead > RatioFloorBytes && BytesRead > maxRatio * Math.Max(1, compressedBytes))
            throw DatasetErrors.TooLarge(
                $"The .npz member '{memberName}' inflates more than {maxRatio:0.#} times its compressed size " +
                $"({DatasetErrors.FormatBytes(BytesRead)} so far from {DatasetErrors.FormatBytes(compressedBytes)}), which is how a zip bomb looks, not a dataset.");
        return n;
    }

    /// <summary>
    /// Compares the CRC-32 of every byte read with the one the zip directory stores; call once the member has been
    /// read to its end, after the array's own checks, so a truncated or overlong array is reported as such first.
    /// </summary>
    public void CheckCrc()
    {
        if (expectedCrc is { } expected && crc != expected)
            throw DatasetErrors.Invalid(
                $"The .npz member '{memberName}' fails its CRC-32 check (stored {expected:x8}, computed {crc:x8}): the archive is damaged; save it again with np.savez.");
    }

    public override void Flush()
    {
    }

    public override long Seek(long offset, SeekOrigin origin) => throw new NotSupportedException();

    public override void SetLength(long value) => throw new NotSupportedException();

    public override void Write(byte[] buffer, int offset, int count) => throw new NotSupportedException();

    protected override void Dispose(bool disposing)
    {
        if (disposing) inner.Dispose();
        base.Dispose(disposing);
    }
}
