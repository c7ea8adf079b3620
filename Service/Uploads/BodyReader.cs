using System.Globalization;
using System.Security.Cryptography;
using Bitbudget.Service.Problems;
using Bitbudget.Service.Store;
using Microsoft.AspNetCore.Http.Features;

namespace Bitbudget.Service.Uploads;

/// <summary>
/// Streams a raw upload body to a staging file through one small buffer, hashing it on the way, and refuses
/// (413) anything over the endpoint's limit before reading (Content-Length) or as soon as the bytes read cross
/// it (chunked), so no body is ever held in memory, let alone twice.
/// </summary>
internal static class BodyReader
{
    private const int BufferBytes = 1 << 16;

    public static async Task<StagedUpload> StageAsync(HttpRequest request, BlobStore blobs, long limitBytes, string what, CancellationToken cancellationToken)
    {
        if (request.ContentLength > limitBytes)
        {
            throw TooLarge(what, limitBytes);
        }

        // Let Kestrel enforce this endpoint's limit rather than its 30 MB default.
        if (request.HttpContext.Features.Get<IHttpMaxRequestBodySizeFeature>() is { IsReadOnly: false } sizeFeature)
        {
            sizeFeature.MaxRequestBodySize = limitBytes + 1;
        }

        var path = blobs.NewStagingPath();
        var staged = new StagedUpload(path, 0, "");
        try
        {
            using var hash = IncrementalHash.CreateHash(HashAlgorithmName.SHA256);
            long length = 0;
            await using (var file = new FileStream(path, FileMode.CreateNew, FileAccess.Write, FileShare.None, 1, FileOptions.Asynchronous))
            {
                var chunk = new byte[BufferBytes];
                int read;
                while ((read = await request.Body.ReadAsync(chunk, cancellationToken).ConfigureAwait(false)) > 0)
                {
                    length += read;
                    if (length > limitBytes)
                    {
                        throw TooLarge(what, limitBytes);
                    }

                    hash.AppendData(chunk, 0, read);
                    await file.WriteAsync(chunk.AsMemory(0, read), cancellationToken).ConfigureAwait(false);
                }

                // The blob store moves this file into place; its bytes must be on disk before the rename makes them visible.
                file.Flush(flushToDisk: true);
            }

            if (length == 0)
            {
                throw ServiceException.Invalid("body", $"The request body is empty; send the {what}'s bytes as application/octet-stream.");
            }

            return new StagedUpload(path, length, Convert.ToHexStringLower(hash.GetHashAndReset()));
        }
        catch
        {
            staged.Dispose();
            throw;
        }
    }

    private static ServiceException TooLarge(string what, long limitBytes) => new(
        StatusCodes.Status413PayloadTooLarge,
        ProblemTypes.PayloadTooLarge,
        $"The {what} is larger than the {limitBytes.ToString(CultureInfo.InvariantCulture)} bytes this service accepts; raise the limit in the service's settings or send a smaller file.");
}
